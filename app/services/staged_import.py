"""Big imports without a long write lock and without the file in memory: staged, streamed.

What it does
    :func:`import_stream` imports a plain-text file, or bracketed trees as gold or as one
    annotator's annotations, read line by line
    (``open_lines`` is called twice, once per pass, and yields the file's lines as text):

    1. **Check** (no writes): every line or tree is read and checked as
       :mod:`app.services.imports` does; duplicates (within the file and against the corpus)
       are found from 8-byte digests of the token lists, so memory grows with the number of
       sentences by a few dozen bytes each, not with their text. A bad line stops the import
       here, with its line and column, and nothing is written.
    2. **Stage**: the sentences (and gold rows) are written into a hidden *staging corpus* in
       chunks of :data:`STAGE_CHUNK`, each chunk its own short transaction, so on SQLite the
       write lock is free between chunks and saves go on meanwhile. A staging corpus is seen
       by nobody (lists leave it out, its id answers 404: ``is_staging``).
    3. **Publish**: one short transaction moves the staged sentences into the real document
       (one UPDATE), adds the labels and tags, counts the gold for the gold loop and logs the
       ``import`` event; then the staging corpus is deleted. To users the import appears
       whole at that moment or not at all.

    If staging or publishing fails, the staging corpus is deleted (nothing of the file stays);
    one left behind by a killed process (and older than :data:`ABANDONED_AFTER`) is removed
    when a server starts (:func:`drop_abandoned_staging`).

Annotation imports (``kind="annotation"``: one annotator's trees) take the same three steps.
The check also decides where each tree goes (:class:`app.services.imports.AttachCheck`: onto
a free sentence of the document with the same words, or a new sentence). Staging writes the
annotation and its ``import`` revision on a staged sentence: a new sentence for a new one, a
*placeholder* (in a second staging document, its ``position`` holding the target sentence's
id) for a tree that attaches. Publishing, in its one transaction, checks that the annotator
has not started any of the target sentences meanwhile and that they are still there (an
annotator's own save is never overwritten: the import fails whole and says so), assigns the
sentences to the annotator, and moves the new sentences into the document and the
placeholders' annotations onto their targets (two UPDATEs). Then the sentences that now have
every annotation they wait for go to :func:`app.services.agreement.on_submitted` (as the
Bench's submit does), :data:`ROUTE_CHUNK` per transaction, each placeholder removed with its
target's routing: scoring runs to milliseconds per sentence, so done inside the publish it
held the write lock for minutes on a large second annotator's file. A process killed in
between leaves the placeholders; the next start routes them, then drops the staging corpus.

Cost: two reads of the file, O(lines); memory O(sentences) digests plus one chunk of rows
(for annotations also the digests of the document's free sentences); the publish step is one
UPDATE over the staged rows (annotations: a few set-wise statements; the agreement scoring
of the sentences the file completes follows in short transactions).
"""

from __future__ import annotations

import hashlib
import uuid
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path
from typing import Any, BinaryIO

from sqlalchemy import BigInteger, Select, cast, delete, func, insert, literal, select, update
from sqlalchemy.orm import Session, aliased

from app.models import (
    ANN_SUBMITTED,
    SENT_GOLD,
    SENT_IN_PROGRESS,
    SENT_QUEUED,
    Annotation,
    Assignment,
    Corpus,
    Document,
    Event,
    Gold,
    Revision,
    Sentence,
    User,
    utcnow,
)
from app.services import agreement
from app.services.corpora import (
    STAGING_KEY,
    absorb_tree_inventory,
    clean_name,
    corpus_by_name,
    create_corpus,
    is_staging,
)
from app.services.errors import BadInput, NotFound
from app.services.gold import gold_added
from app.services.imports import (
    KINDS,
    MAX_DOCUMENT_NAME,
    REPORT_DUPLICATES,
    AttachCheck,
    Duplicate,
    DuplicateCheck,
    ImportFailed,
    ImportResult,
    Progress,
    _add_annotations,
    _annotator,
    _document,
    _Item,
    _tokenizer,
    chunk_lines,
    text_item,
    tree_chunk_items,
)

STAGE_CHUNK = 2_000  # sentences per staging transaction


def binary_lines(handle: BinaryIO, source: str) -> Iterator[str]:
    """The lines of an open binary file as text, decoded one at a time; a byte that is not
    UTF-8 is an ImportFailed naming its line and byte. A leading byte-order mark is dropped."""
    handle.seek(0)
    for number, raw in enumerate(handle, start=1):
        try:
            line = raw.decode("utf-8")
        except UnicodeDecodeError as err:
            raise ImportFailed(
                f"the file is not UTF-8 text: byte 0x{raw[err.start]:02X} (byte "
                f"{err.start + 1} of the line) cannot be decoded; save the file as UTF-8 and "
                "import it again",
                source=source,
                line=number,
            ) from None
        if number == 1 and line.startswith("\ufeff"):
            line = line[1:]
        yield line


def _digest(tokens: list[str]) -> int:
    return int.from_bytes(
        hashlib.blake2b("\x1f".join(tokens).encode(), digest_size=8).digest(), "big"
    )


@dataclass
class _Pass:
    blank: int = 0
    dropped: int = 0
    labels: set[str] = field(default_factory=set)
    tags: set[str] = field(default_factory=set)


def _items(
    lines: Iterable[str], kind: str, source: str, tokenizer: str, stats: _Pass
) -> Iterator[_Item]:
    if kind == "text":
        split = _tokenizer(tokenizer)
        for number, line in enumerate(lines, start=1):
            item = text_item(number, line, split, source)
            if item is None:
                stats.blank += 1
            else:
                yield item
        return
    for offset, chunk in chunk_lines(lines):
        found, dropped, labels, tags = tree_chunk_items(offset, chunk, source)
        stats.dropped += dropped
        stats.labels |= labels
        stats.tags |= tags
        yield from found


def _check(
    db: Session,
    corpus: Corpus | None,
    lines: Iterable[str],
    kind: str,
    source: str,
    tokenizer: str,
    attach: AttachCheck | None = None,
) -> tuple[int, list[Duplicate], set[int], dict[int, int], _Pass]:
    """Pass 1: count, duplicates (and the ordinals of the duplicate items), the sentences
    items attach to (ordinal to sentence id, annotations only), statistics. Items that attach
    are not duplicates: they are the second annotator's tree of the same sentence."""
    check = DuplicateCheck(db, corpus, _digest)
    dups: list[Duplicate] = []
    dup_ordinals: set[int] = set()
    targets: dict[int, int] = {}
    stats = _Pass()
    count = 0
    for ordinal, item in enumerate(_items(lines, kind, source, tokenizer, stats)):
        count += 1
        if attach is not None and (target := attach(item)) is not None:
            targets[ordinal] = target
            continue
        if (dup := check(item)) is not None:
            dups.append(dup)
            dup_ordinals.add(ordinal)
    if not count:  # every line was blank: anything else gives an item or an error
        raise ImportFailed(
            "the file is blank (only whitespace): there is nothing to import", source=source
        )
    return count, dups, dup_ordinals, targets, stats


def _drop_staging(db: Session, staging_id: int) -> None:
    db.rollback()
    staged = select(Sentence.id).where(Sentence.corpus_id == staging_id)
    staged_annotations = select(Annotation.id).where(Annotation.sentence_id.in_(staged))
    db.execute(delete(Revision).where(Revision.annotation_id.in_(staged_annotations)))
    db.execute(delete(Annotation).where(Annotation.sentence_id.in_(staged)))
    db.execute(delete(Gold).where(Gold.sentence_id.in_(staged)))
    db.execute(delete(Sentence).where(Sentence.corpus_id == staging_id))
    db.execute(delete(Document).where(Document.corpus_id == staging_id))
    db.execute(delete(Corpus).where(Corpus.id == staging_id))
    db.commit()


#: A staging corpus older than this was left by an import whose process died (another server
#: process may be staging a younger one right now, so those are left alone).
ABANDONED_AFTER = timedelta(hours=6)


def drop_abandoned_staging(db: Session, older_than: timedelta = ABANDONED_AFTER) -> int:
    """Delete the staging corpora a killed import left behind (called at start); an
    annotation import killed after publishing first has its completed sentences routed.
    Commits."""
    before = utcnow() - older_than
    ids = [
        c.id for c in db.scalars(select(Corpus).where(Corpus.created_at <= before)) if is_staging(c)
    ]
    for staging_id in ids:
        placeholders = select(Sentence.id).where(
            Sentence.corpus_id == staging_id, Sentence.document_id.in_(_attach_docs(staging_id))
        )
        published = db.scalar(select(func.count()).select_from(placeholders.subquery())) and (
            not db.scalar(
                select(func.count())
                .select_from(Annotation)
                .where(Annotation.sentence_id.in_(placeholders))
            )
        )
        if published:
            for doc_id in db.scalars(_attach_docs(staging_id)):
                _route(db, doc_id, [])
        _drop_staging(db, staging_id)
    return len(ids)


def _attach_docs(staging_id: int) -> Select[int]:
    return select(Document.id).where(
        Document.corpus_id == staging_id, Document.name == ATTACH_DOCUMENT
    )


#: Sentences routed to the agreement service per transaction after an annotation import.
ROUTE_CHUNK = 25
#: The staging document of an annotation import's placeholders.
ATTACH_DOCUMENT = "attached"


def _route(db: Session, attach_doc_id: int, new_ids: list[int]) -> None:
    """Hand each sentence an annotation import completed (the placeholders' targets, and
    ``new_ids``) to :func:`app.services.agreement.on_submitted`, :data:`ROUTE_CHUNK` per
    transaction; a placeholder goes in the transaction that routes its target. Commits."""
    db.expire_all()  # the publishing UPDATEs went around the session
    while True:
        rows = db.execute(
            select(Sentence.id, Sentence.position)
            .where(Sentence.document_id == attach_doc_id)
            .order_by(Sentence.id)
            .limit(ROUTE_CHUNK)
        ).all()
        if not rows:
            break
        for target in (position for _, position in rows):
            _route_one(db, target)
        db.execute(delete(Sentence).where(Sentence.id.in_([pid for pid, _ in rows])))
        db.commit()
    for start in range(0, len(new_ids), ROUTE_CHUNK):
        for sentence_id in new_ids[start : start + ROUTE_CHUNK]:
            _route_one(db, sentence_id)
        db.commit()


def _route_one(db: Session, sentence_id: int) -> None:
    sentence = db.get(Sentence, sentence_id)
    if sentence is None:
        return
    corpus = db.get(Corpus, sentence.corpus_id)
    submitted = db.scalar(
        select(func.count())
        .select_from(Annotation)
        .where(Annotation.sentence_id == sentence_id, Annotation.state == ANN_SUBMITTED)
    )
    if corpus is not None and (submitted or 0) >= corpus.options.annotators_per_sentence:
        agreement.on_submitted(db, sentence)


def import_stream(
    db: Session,
    open_lines: Callable[[], Iterable[str]],
    *,
    source: str,
    corpus_name: str,
    document_name: str,
    kind: str = "text",
    tokenizer: str = "whitespace",
    annotator: str | None = None,
    skip_duplicates: bool = False,
    create_corpus_if_missing: bool = True,
    user: User | None = None,
    progress: Progress | None = None,
) -> ImportResult:
    """Import a text, gold or annotation file in three steps (check, stage, publish).
    Commits."""
    if kind not in KINDS:
        raise BadInput(f"unknown import kind {kind!r}; one of {', '.join(KINDS)}")
    document_name = clean_name(document_name, "document", MAX_DOCUMENT_NAME)
    corpus_name = clean_name(corpus_name)
    ann_user = _annotator(db, annotator) if kind == "annotation" else None
    corpus = corpus_by_name(db, corpus_name)
    if corpus is None and not create_corpus_if_missing:
        raise NotFound(f"no corpus named {corpus_name!r}")
    attach = None
    if ann_user is not None:
        doc = None
        if corpus is not None:
            doc = db.scalar(
                select(Document).where(
                    Document.corpus_id == corpus.id, Document.name == document_name
                )
            )
        attach = AttachCheck(db, doc, ann_user, _digest)
    count, dups, dup_ordinals, targets, stats = _check(
        db, corpus, open_lines(), kind, source, tokenizer, attach
    )
    del attach  # its map of free sentences is not needed any more
    db.rollback()  # the check read only; start the staging with a fresh transaction

    staging = Corpus(
        name=f"import in progress {uuid.uuid4().hex}",
        label_set=[],
        tag_set=[],
        settings={STAGING_KEY: source},
    )
    db.add(staging)
    db.flush()
    stage_doc = Document(corpus_id=staging.id, name="staged", position=0)
    attach_doc = Document(corpus_id=staging.id, name=ATTACH_DOCUMENT, position=1)
    db.add_all([stage_doc, attach_doc])
    db.commit()
    staging_id, stage_doc_id, attach_doc_id = staging.id, stage_doc.id, attach_doc.id
    state = {"text": SENT_QUEUED, "gold": SENT_GOLD, "annotation": SENT_IN_PROGRESS}[kind]
    now = utcnow()
    imported = skipped = 0
    try:
        batch: list[tuple[_Item, Sentence]] = []

        def write() -> None:
            rows: list[Any] = [s for _, s in batch]
            db.add_all(rows)
            db.flush()
            if kind == "gold":
                golds = [
                    Gold(
                        sentence_id=s.id,
                        tree=item.tree,
                        provenance="import",
                        note=f"imported from {source}, line {item.line}",
                        created_at=now,
                    )
                    for item, s in batch
                ]
                db.add_all(golds)
                rows += golds
            elif ann_user is not None:
                rows += _add_annotations(db, batch, ann_user, now, assign=False)
            db.commit()
            for row in rows:  # written: let them go, so memory holds one chunk at a time
                db.expunge(row)
            batch.clear()
            if progress:
                progress(imported + skipped + len(targets), count)

        for ordinal, item in enumerate(_items(open_lines(), kind, source, tokenizer, _Pass())):
            if ordinal in targets:  # a placeholder: its position holds the target's id
                place, doc_id = targets[ordinal], attach_doc_id
            elif ordinal in dup_ordinals and skip_duplicates:
                skipped += 1
                continue
            else:
                place, doc_id = imported, stage_doc_id
                imported += 1
            batch.append(
                (
                    item,
                    Sentence(
                        corpus_id=staging_id,
                        document_id=doc_id,
                        position=place,
                        tokens=item.tokens,
                        text=item.text,
                        state=state,
                        created_at=now,
                    ),
                )
            )
            if len(batch) >= STAGE_CHUNK:
                write()
        if batch:
            write()
        result, new_to_route = _publish(
            db,
            staging_id,
            stage_doc_id,
            attach_doc_id,
            source=source,
            corpus_name=corpus_name,
            document_name=document_name,
            kind=kind,
            ann_user=ann_user,
            user=user,
            stats=stats,
            imported=imported,
            attached=len(targets),
            skipped=skipped,
            dups=dups,
            now=now,
        )
    except BaseException:
        _drop_staging(db, staging_id)
        raise
    # published: now the sentences the file completes go to the agreement service, a few per
    # transaction (scoring is slow next to a write: done in the publish transaction it held
    # the write lock for minutes); a process killed meanwhile leaves the placeholders, and the
    # next start routes them (:func:`drop_abandoned_staging`)
    _route(db, attach_doc_id, new_to_route)
    _drop_staging(db, staging_id)  # only emptied staging documents are left
    if progress:
        progress(count, count)
    return result


def _publish(
    db: Session,
    staging_id: int,
    stage_doc_id: int,
    attach_doc_id: int,
    *,
    source: str,
    corpus_name: str,
    document_name: str,
    kind: str,
    ann_user: User | None,
    user: User | None,
    stats: _Pass,
    imported: int,
    attached: int,
    skipped: int,
    dups: list[Duplicate],
    now: Any,
) -> tuple[ImportResult, list[int]]:
    """The staged sentences become the document's, in one short transaction; answers the
    result and the new sentences already complete (one annotator per sentence) for
    :func:`_route`. Commits."""
    corpus = corpus_by_name(db, corpus_name)
    corpus_created = corpus is None
    if corpus is None:
        corpus = create_corpus.step(db, corpus_name, user=user)
    doc, doc_created = _document(db, corpus, document_name)
    last = db.scalar(
        select(func.coalesce(func.max(Sentence.position), -1)).where(Sentence.document_id == doc.id)
    )
    offset = (last if last is not None else -1) + 1
    ready: list[int] = []
    if ann_user is not None:
        ready = _publish_annotations(
            db, corpus, doc, stage_doc_id, attach_doc_id, ann_user, attached, offset, now, source
        )
    db.execute(
        update(Sentence)
        .where(Sentence.document_id == stage_doc_id)
        .values(corpus_id=corpus.id, document_id=doc.id, position=Sentence.position + offset),
        execution_options={"synchronize_session": False},
    )
    result = ImportResult(
        corpus_id=corpus.id,
        corpus_name=corpus.name,
        document_id=doc.id,
        document_name=doc.name,
        kind=kind,
        source=source,
        imported=imported,
        attached=attached,
        skipped_duplicates=skipped,
        blank_lines=stats.blank,
        empty_elements_dropped=stats.dropped,
        duplicates=dups,
        corpus_created=corpus_created,
        document_created=doc_created,
    )
    if kind != "text":
        absorb_tree_inventory(corpus, stats.labels, stats.tags)
    if kind == "gold" and imported:
        gold_added(db, corpus)
    detail: dict[str, Any] = {
        "source": source,
        "document": doc.name,
        "kind": kind,
        "imported": imported,
        "attached": attached,
        "duplicates": len(dups),
        "annotator": ann_user.username if ann_user else None,
        "summary": result.summary(),
        "skipped_duplicates": skipped,
        "duplicate_lines": [d.describe() for d in dups[:REPORT_DUPLICATES]],
        "staged": True,
    }
    event = Event(
        user_id=user.id if user else None, kind="import", corpus_id=corpus.id, detail=detail
    )
    db.add(event)
    db.flush()
    result.event_id = event.id
    db.commit()
    return result, ready


def _publish_annotations(
    db: Session,
    corpus: Corpus,
    doc: Document,
    stage_doc_id: int,
    attach_doc_id: int,
    ann_user: User,
    attached: int,
    offset: int,
    now: Any,
    source: str,
) -> list[int]:
    """The annotation part of publishing, before the new sentences move: check the targets,
    assign, move the placeholders' annotations onto their targets. Answers the ids of the
    sentences that now have every annotation they wait for. Does not commit."""
    placeholder = aliased(Sentence)
    targets = select(placeholder.position).where(placeholder.document_id == attach_doc_id)
    if attached:
        still = db.scalar(
            select(func.count())
            .select_from(Sentence)
            .where(
                Sentence.id.in_(targets),
                Sentence.document_id == doc.id,
                Sentence.state != SENT_GOLD,
            )
        )
        if still != attached:
            raise ImportFailed(
                f"{attached - int(still or 0)} of the sentences this file's trees go on were "
                "removed or made gold while it was imported; nothing was imported, import the "
                "file again",
                source=source,
            )
        started = db.scalar(
            select(func.count())
            .select_from(Annotation)
            .where(Annotation.user_id == ann_user.id, Annotation.sentence_id.in_(targets))
        )
        if started:
            raise ImportFailed(
                f"{ann_user.username} started {started} of the sentences this file's trees go "
                "on while it was imported; their own work is kept and nothing was imported: "
                "import the file again (those trees then become new sentences or attach "
                "elsewhere)",
                source=source,
            )
    # assignments: the targets (unless already assigned) and the new sentences, in reading
    # order (the rank of app.models.reading_rank, computed in SQL)
    target = aliased(Sentence)
    already = select(Assignment.sentence_id).where(Assignment.user_id == ann_user.id)
    shift = 1 << 32
    for sentence_id, corpus_id, rank, where in (
        (
            target.id,
            target.corpus_id,
            cast(target.document_id, BigInteger) * shift + target.position,
            (target.id.in_(targets), target.id.not_in(already)),
        ),
        (
            Sentence.id,
            literal(corpus.id),
            literal(doc.id * shift + offset, BigInteger) + Sentence.position,
            (Sentence.document_id == stage_doc_id,),
        ),
    ):
        db.execute(
            insert(Assignment).from_select(
                ["sentence_id", "user_id", "created_at", "corpus_id", "rank"],
                select(sentence_id, literal(ann_user.id), literal(now), corpus_id, rank).where(
                    *where
                ),
            )
        )
    needed = corpus.options.annotators_per_sentence
    ready = (
        list(db.scalars(select(Sentence.id).where(Sentence.document_id == stage_doc_id)))
        if needed <= 1
        else []
    )
    if attached:
        db.execute(
            update(Annotation)
            .where(
                Annotation.sentence_id.in_(
                    select(placeholder.id).where(placeholder.document_id == attach_doc_id)
                )
            )
            .values(
                sentence_id=select(placeholder.position)
                .where(placeholder.id == Annotation.sentence_id)
                .scalar_subquery()
            ),
            execution_options={"synchronize_session": False},
        )
        db.execute(
            update(Sentence)
            .where(Sentence.id.in_(targets), Sentence.state == SENT_QUEUED)
            .values(state=SENT_IN_PROGRESS),
            execution_options={"synchronize_session": False},
        )
    # the targets are routed after publishing, from the placeholders (:func:`_route`)
    return ready


def import_handle(
    db: Session,
    handle: BinaryIO,
    *,
    source: str,
    corpus_name: str,
    kind: str = "text",
    document_name: str | None = None,
    annotator: str | None = None,
    **options: Any,
) -> ImportResult:
    """Import an open binary file, streamed and staged (:func:`import_stream`)."""
    if kind not in KINDS:
        raise BadInput(f"unknown import kind {kind!r}; one of {', '.join(KINDS)}")
    document_name = document_name or Path(source).stem
    handle.seek(0, 2)
    if handle.tell() == 0:
        raise ImportFailed("the file is empty: there is nothing to import", source=source)
    return import_stream(
        db,
        lambda: binary_lines(handle, source),
        source=source,
        corpus_name=corpus_name,
        document_name=document_name,
        kind=kind,
        annotator=annotator,
        **options,
    )


def import_path(db: Session, path: Path, **options: Any) -> ImportResult:
    """:func:`import_handle` on a file on disk; the document name defaults to its stem."""
    try:
        handle = path.open("rb")
    except OSError as err:
        raise ImportFailed(f"cannot read the file: {err.strerror}", source=str(path)) from None
    with handle:
        options.setdefault("document_name", path.stem)
        return import_handle(db, handle, source=path.name, **options)
