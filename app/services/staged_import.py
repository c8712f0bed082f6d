"""Big imports without a long write lock and without the file in memory: staged, streamed.

What it does
    :func:`import_stream` imports a plain-text or bracketed gold file read line by line
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

Annotation imports (which attach trees to existing sentences) keep the one-transaction path
of :func:`app.services.imports.import_bytes`.

Cost: two reads of the file, O(lines); memory O(sentences) digests plus one chunk of rows;
the publish step is one UPDATE over the staged rows.
"""

from __future__ import annotations

import hashlib
import uuid
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path
from typing import Any, BinaryIO

from sqlalchemy import delete, func, select, update
from sqlalchemy.orm import Session

from app.models import SENT_GOLD, SENT_QUEUED, Corpus, Document, Event, Gold, Sentence, User, utcnow
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
    Duplicate,
    DuplicateCheck,
    ImportFailed,
    ImportResult,
    Progress,
    _document,
    _Item,
    _tokenizer,
    chunk_lines,
    import_bytes,
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
    db: Session, corpus: Corpus | None, lines: Iterable[str], kind: str, source: str, tokenizer: str
) -> tuple[int, list[Duplicate], set[int], _Pass]:
    """Pass 1: count, duplicates (and the ordinals of the duplicate items), statistics."""
    check = DuplicateCheck(db, corpus, _digest)
    dups: list[Duplicate] = []
    dup_ordinals: set[int] = set()
    stats = _Pass()
    count = 0
    for ordinal, item in enumerate(_items(lines, kind, source, tokenizer, stats)):
        count += 1
        if (dup := check(item)) is not None:
            dups.append(dup)
            dup_ordinals.add(ordinal)
    if not count:  # every line was blank: anything else gives an item or an error
        raise ImportFailed(
            "the file is blank (only whitespace): there is nothing to import", source=source
        )
    return count, dups, dup_ordinals, stats


def _drop_staging(db: Session, staging_id: int) -> None:
    db.rollback()
    db.execute(
        delete(Gold).where(
            Gold.sentence_id.in_(select(Sentence.id).where(Sentence.corpus_id == staging_id))
        )
    )
    db.execute(delete(Sentence).where(Sentence.corpus_id == staging_id))
    db.execute(delete(Document).where(Document.corpus_id == staging_id))
    db.execute(delete(Corpus).where(Corpus.id == staging_id))
    db.commit()


#: A staging corpus older than this was left by an import whose process died (another server
#: process may be staging a younger one right now, so those are left alone).
ABANDONED_AFTER = timedelta(hours=6)


def drop_abandoned_staging(db: Session, older_than: timedelta = ABANDONED_AFTER) -> int:
    """Delete the staging corpora a killed import left behind (called at start). Commits."""
    before = utcnow() - older_than
    ids = [
        c.id for c in db.scalars(select(Corpus).where(Corpus.created_at <= before)) if is_staging(c)
    ]
    for staging_id in ids:
        _drop_staging(db, staging_id)
    return len(ids)


def import_stream(
    db: Session,
    open_lines: Callable[[], Iterable[str]],
    *,
    source: str,
    corpus_name: str,
    document_name: str,
    kind: str = "text",
    tokenizer: str = "whitespace",
    skip_duplicates: bool = False,
    create_corpus_if_missing: bool = True,
    user: User | None = None,
    progress: Progress | None = None,
) -> ImportResult:
    """Import a text or gold file in three steps (check, stage, publish). Commits."""
    if kind not in ("text", "gold"):
        raise BadInput(f"a streamed import takes text or gold, not {kind!r}")
    document_name = clean_name(document_name, "document", MAX_DOCUMENT_NAME)
    corpus_name = clean_name(corpus_name)
    corpus = corpus_by_name(db, corpus_name)
    if corpus is None and not create_corpus_if_missing:
        raise NotFound(f"no corpus named {corpus_name!r}")
    count, dups, dup_ordinals, stats = _check(db, corpus, open_lines(), kind, source, tokenizer)
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
    db.add(stage_doc)
    db.commit()
    staging_id, stage_doc_id = staging.id, stage_doc.id
    state = SENT_GOLD if kind == "gold" else SENT_QUEUED
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
            db.commit()
            for row in rows:  # written: let them go, so memory holds one chunk at a time
                db.expunge(row)
            batch.clear()
            if progress:
                progress(imported + skipped, count)

        for ordinal, item in enumerate(_items(open_lines(), kind, source, tokenizer, _Pass())):
            if ordinal in dup_ordinals and skip_duplicates:
                skipped += 1
                continue
            batch.append(
                (
                    item,
                    Sentence(
                        corpus_id=staging_id,
                        document_id=stage_doc_id,
                        position=imported,
                        tokens=item.tokens,
                        text=item.text,
                        state=state,
                        created_at=now,
                    ),
                )
            )
            imported += 1
            if len(batch) >= STAGE_CHUNK:
                write()
        if batch:
            write()
        result = _publish(
            db,
            staging_id,
            stage_doc_id,
            source=source,
            corpus_name=corpus_name,
            document_name=document_name,
            kind=kind,
            user=user,
            stats=stats,
            imported=imported,
            skipped=skipped,
            dups=dups,
        )
    except BaseException:
        _drop_staging(db, staging_id)
        raise
    _drop_staging(db, staging_id)  # empty now
    if progress:
        progress(count, count)
    return result


def _publish(
    db: Session,
    staging_id: int,
    stage_doc_id: int,
    *,
    source: str,
    corpus_name: str,
    document_name: str,
    kind: str,
    user: User | None,
    stats: _Pass,
    imported: int,
    skipped: int,
    dups: list[Duplicate],
) -> ImportResult:
    """The staged sentences become the document's, in one short transaction. Commits."""
    corpus = corpus_by_name(db, corpus_name)
    corpus_created = corpus is None
    if corpus is None:
        corpus = create_corpus.step(db, corpus_name, user=user)
    doc, doc_created = _document(db, corpus, document_name)
    last = db.scalar(
        select(func.coalesce(func.max(Sentence.position), -1)).where(Sentence.document_id == doc.id)
    )
    offset = (last if last is not None else -1) + 1
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
        skipped_duplicates=skipped,
        blank_lines=stats.blank,
        empty_elements_dropped=stats.dropped,
        duplicates=dups,
        corpus_created=corpus_created,
        document_created=doc_created,
    )
    if kind == "gold":
        absorb_tree_inventory(corpus, stats.labels, stats.tags)
        if imported:
            gold_added(db, corpus)
    detail: dict[str, Any] = {
        "source": source,
        "document": doc.name,
        "kind": kind,
        "imported": imported,
        "attached": 0,
        "duplicates": len(dups),
        "annotator": None,
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
    return result


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
    """Import an open binary file: text and gold streamed and staged (:func:`import_stream`),
    annotations through :func:`app.services.imports.import_bytes` (one transaction)."""
    if kind not in KINDS:
        raise BadInput(f"unknown import kind {kind!r}; one of {', '.join(KINDS)}")
    document_name = document_name or Path(source).stem
    handle.seek(0, 2)
    if handle.tell() == 0:
        raise ImportFailed("the file is empty: there is nothing to import", source=source)
    if kind == "annotation":
        handle.seek(0)
        return import_bytes(
            db,
            handle.read(),
            source=source,
            corpus_name=corpus_name,
            kind=kind,
            document_name=document_name,
            annotator=annotator,
            **options,
        )
    return import_stream(
        db,
        lambda: binary_lines(handle, source),
        source=source,
        corpus_name=corpus_name,
        document_name=document_name,
        kind=kind,
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
