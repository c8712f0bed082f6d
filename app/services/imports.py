"""Import files into a corpus: plain sentences, or bracketed trees as gold or as annotations.

Three kinds (:data:`KINDS`):

``text``
    One sentence per line, tokens split on whitespace (or with NLTK's ``TreebankWordTokenizer``,
    which needs no downloaded data). Blank lines are skipped; the sentences are queued.
``gold``
    Bracketed trees (any layout: one per line, several per line, or indented over several
    lines). Each becomes a gold sentence with a Gold row of provenance ``import``.
``annotation``
    Bracketed trees recorded as one named annotator's submitted annotations (assignment,
    annotation, revision with source ``import``). A tree whose words equal a sentence of the
    same document that this annotator has not annotated yet is attached to that sentence (so
    a second annotator's file of the same text lands on the same sentences); otherwise a new
    sentence is made.

All or nothing per file: the whole file is decoded and parsed before anything is written, and
the rows are then written in one transaction, so a bad line anywhere aborts the file and
nothing of it is stored. (The CLI, the API and the Transfer page import every kind through
:mod:`app.services.staged_import` instead, which streams the file and stages it in short
transactions; this module's readers and checks are shared by both.) Errors
(:class:`ImportFailed`) name the file, the line, and for bracket errors the column; non-UTF-8
bytes are reported by byte offset and line.

Duplicate sentences (same tokens) are reported, within the file and against the corpus; they
are imported unless ``skip_duplicates``.

Cost: reading is O(size of the file); the duplicate check loads the token lists of the
corpus once (O(corpus)); rows are written in batches. A progress callback is told
``(done, total)`` while rows are written.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from nltk import Tree
from sqlalchemy import func, select
from sqlalchemy.orm import Session

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
    reading_rank,
    utcnow,
)
from app.services import agreement  # owns what follows a complete set of annotations
from app.services.corpora import (
    absorb_tree_inventory,
    clean_name,
    corpus_by_name,
    create_corpus,
    tree_inventory,
)
from app.services.errors import BadInput, NotFound
from app.services.gold import gold_added
from app.wording import plural
from parser.chart import MAX_WORDS
from parser.errors import BracketSyntaxError
from parser.trees import (
    TreeError,
    drop_empty_elements,
    escape_word,
    is_preterminal,
    read_trees,
    text_lines,
    write_tree,
)

KINDS = ("text", "gold", "annotation")
TOKENIZERS = ("whitespace", "treebank")
#: Longest sentence accepted: CKY time grows with the cube of the length, and a line this long
#: is almost always a paragraph that was not split into sentences.
MAX_TOKENS = MAX_WORDS  # the longest sentence the parser is tested at
MAX_DOCUMENT_NAME = 255
BATCH = 500

Progress = Callable[[int, int], None]


class ImportFailed(BadInput):
    """A file that cannot be imported; ``line``/``column`` locate the problem when known."""

    def __init__(
        self, detail: str, *, source: str, line: int | None = None, column: int | None = None
    ) -> None:
        where = source
        if line is not None:
            where += f", line {line}"
            if column is not None:
                where += f", column {column}"
        super().__init__(f"{where}: {detail}", source=source, line=line, column=column)
        self.source = source
        self.line = line
        self.column = column


@dataclass(frozen=True)
class Duplicate:
    """Line ``line`` of the file repeats an earlier line of the file or a corpus sentence."""

    line: int
    text: str
    same_as_line: int | None = None
    same_as_sentence_id: int | None = None
    same_as_document: str | None = None

    def describe(self) -> str:
        if self.same_as_line is not None:
            return f"line {self.line} repeats line {self.same_as_line}: {self.text}"
        return (
            f"line {self.line} repeats sentence {self.same_as_sentence_id} of document "
            f"{self.same_as_document!r}: {self.text}"
        )


@dataclass
class ImportResult:
    corpus_id: int
    corpus_name: str
    document_id: int
    document_name: str
    kind: str
    source: str
    imported: int = 0
    attached: int = 0
    skipped_duplicates: int = 0
    blank_lines: int = 0
    empty_elements_dropped: int = 0
    duplicates: list[Duplicate] = field(default_factory=list)
    corpus_created: bool = False
    document_created: bool = False
    #: The ``import`` event that records this import (its report: :func:`import_report`).
    event_id: int | None = None

    def summary(self) -> str:
        parts = [
            f"{plural(self.imported, 'sentence')} imported into {self.corpus_name!r} / "
            f"{self.document_name!r} as {self.kind}"
        ]
        if self.attached:
            parts.append(f"{self.attached} attached to existing sentences")
        if self.duplicates:
            parts.append(
                plural(len(self.duplicates), "duplicate")
                + (f", {self.skipped_duplicates} skipped" if self.skipped_duplicates else "")
            )
        if self.empty_elements_dropped:
            parts.append(f"{plural(self.empty_elements_dropped, 'empty element')} removed")
        return "; ".join(parts)


@dataclass
class _Item:
    """One sentence read from the file, before it is stored."""

    line: int
    tokens: list[str]
    text: str
    tree: str | None = None


# ---------------------------------------------------------------------------------------------
# reading


def decode(data: bytes, source: str) -> str:
    """UTF-8 text (a leading byte-order mark is dropped); anything else is a located error."""
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as err:
        line = data.count(b"\n", 0, err.start) + 1
        column = err.start - (data.rfind(b"\n", 0, err.start) + 1) + 1
        raise ImportFailed(
            f"the file is not UTF-8 text: byte 0x{data[err.start]:02X} at byte offset "
            f"{err.start} (byte {column} of the line) cannot be decoded; save the file as "
            f"UTF-8 and import it again",
            source=source,
            line=line,
        ) from None
    if text.startswith("\ufeff"):
        text = text[1:]
    if not text.strip():
        what = "empty" if not data else "blank (only whitespace)"
        raise ImportFailed(f"the file is {what}: there is nothing to import", source=source)
    return text


def _tokenizer(name: str) -> Callable[[str], list[str]]:
    if name == "whitespace":
        return str.split
    if name == "treebank":
        from nltk.tokenize import TreebankWordTokenizer

        tokenize: Callable[[str], list[str]] = TreebankWordTokenizer().tokenize
        return tokenize
    raise BadInput(f"unknown tokenizer {name!r}; one of {', '.join(TOKENIZERS)}")


def _check_length(tokens: Sequence[str], source: str, line: int) -> None:
    if len(tokens) > MAX_TOKENS:
        raise ImportFailed(
            f"{len(tokens)} tokens; a sentence has at most {MAX_TOKENS} (is it "
            f"a paragraph that needs splitting into sentences?)",
            source=source,
            line=line,
        )


def text_item(
    number: int, line: str, split: Callable[[str], list[str]], source: str
) -> _Item | None:
    """The sentence of one plain-text line (``number`` from 1); None for a blank line."""
    stripped = line.strip()
    if not stripped:
        return None
    if "\x00" in stripped:
        raise ImportFailed(
            "the line holds a NUL character (is this a binary file?)",
            source=source,
            line=number,
            column=line.index("\x00") + 1,
        )
    tokens = [escape_word(tok) for tok in split(stripped)]
    if not tokens:
        return None
    _check_length(tokens, source, number)
    return _Item(line=number, tokens=tokens, text=" ".join(stripped.split()))


def read_text_items(
    text: str, source: str, tokenizer: str = "whitespace"
) -> tuple[list[_Item], int]:
    """Sentences of a plain-text file and the number of blank lines skipped."""
    split = _tokenizer(tokenizer)
    items: list[_Item] = []
    blank = 0
    for number, line in enumerate(text_lines(text), start=1):
        item = text_item(number, line, split, source)
        if item is None:
            blank += 1
        else:
            items.append(item)
    return items, blank


def _chunks(text: str) -> list[tuple[int, str]]:
    """Split text into (first line number - 1, chunk) pieces whose brackets balance.

    Each piece holds one or more whole trees, so a tree's first line is known without
    re-scanning, and a bracket error found in a piece is shifted back to file lines.
    """
    return list(chunk_lines(text_lines(text, keepends=True)))


def chunk_lines(lines: Iterable[str]) -> Iterator[tuple[int, str]]:
    """:func:`_chunks` over lines (with their endings) as they come, for streamed files."""
    buffer: list[str] = []
    start = 0
    balance = 0
    for number, line in enumerate(lines):
        if not buffer and not line.strip():
            start = number + 1
            continue
        buffer.append(line)
        balance += line.count("(") - line.count(")")
        if balance <= 0:
            yield start, "".join(buffer)
            buffer, balance, start = [], 0, number + 1
    if buffer:
        yield start, "".join(buffer)


def _check_tree(tree: Tree, source: str, line: int) -> None:
    if is_preterminal(tree):
        raise ImportFailed(
            f"the tree {tree} is a single POS bracket; a sentence tree needs a "
            f"phrase above its words",
            source=source,
            line=line,
        )


def read_tree_items(text: str, source: str) -> tuple[list[_Item], int, set[str], set[str]]:
    """Trees of a bracketed file; also the count of empty elements dropped and the inventory.

    Empty elements (``-NONE-`` traces) are removed: a sentence's tokens are the words a person
    reads, and the editor works on those.
    """
    items: list[_Item] = []
    dropped = 0
    labels: set[str] = set()
    tags: set[str] = set()
    for offset, chunk in _chunks(text):
        found, gone, chunk_labels, chunk_tags = tree_chunk_items(offset, chunk, source)
        items += found
        dropped += gone
        labels |= chunk_labels
        tags |= chunk_tags
    return items, dropped, labels, tags


def tree_chunk_items(
    offset: int, chunk: str, source: str
) -> tuple[list[_Item], int, set[str], set[str]]:
    """The trees of one balanced piece (see :func:`chunk_lines`), the empty elements dropped
    from them and their labels and tags."""
    items: list[_Item] = []
    dropped = 0
    kept: list[Tree] = []
    try:
        trees = read_trees(chunk)
    except BracketSyntaxError as err:
        if "still open" in err.message:
            # The piece never balanced, so its first line opened the tree left unclosed:
            # point there rather than at the end of the file.
            first = text_lines(chunk)[0]
            raise ImportFailed(
                "the tree that begins here is never closed: ')' is missing (the file ends "
                "with brackets still open)",
                source=source,
                line=offset + 1,
                column=first.index("(") + 1 if "(" in first else 1,
            ) from None
        raise ImportFailed(
            f"{err.message}" + (f" (expected {err.expected})" if err.expected else ""),
            source=source,
            line=err.line + offset,
            column=err.column,
        ) from None
    first_line = offset + 1  # chunks start at a non-blank line
    for tree in trees:
        _check_tree(tree, source, first_line)
        before = len(tree.leaves())
        cleaned = drop_empty_elements(tree)
        if cleaned is None:
            raise ImportFailed(
                "the tree holds only empty elements (-NONE-), no words",
                source=source,
                line=first_line,
            )
        dropped += before - len(cleaned.leaves())
        tokens = cleaned.leaves()
        _check_length(tokens, source, first_line)
        try:
            stored = write_tree(cleaned)
        except TreeError as err:
            raise ImportFailed(
                f"the tree cannot be stored: {err}", source=source, line=first_line
            ) from None
        kept.append(cleaned)
        items.append(_Item(line=first_line, tokens=tokens, text=" ".join(tokens), tree=stored))
    labels, tags = tree_inventory(kept)
    return items, dropped, labels, tags


# ---------------------------------------------------------------------------------------------
# storing


class DuplicateCheck:
    """Duplicates of a file's items, within the file and against the corpus's sentences.

    ``key`` turns an item's tokens into what is compared (the tokens themselves, or a digest
    where a streamed file must not hold every sentence). Call the check once per item, in
    file order: it answers the Duplicate the item is, or None for a first occurrence."""

    def __init__(
        self, db: Session, corpus: Corpus | None, key: Callable[[list[str]], Hashable]
    ) -> None:
        self.key = key
        self.existing: dict[Hashable, tuple[int, str]] = {}
        self.seen: dict[Hashable, int] = {}
        if corpus is not None and corpus.id is not None:
            rows = db.execute(
                select(Sentence.id, Sentence.tokens, Document.name)
                .join(Document, Document.id == Sentence.document_id)
                .where(Sentence.corpus_id == corpus.id)
                .order_by(Sentence.id)
            )
            for sid, tokens, doc_name in rows:
                self.existing.setdefault(key(list(tokens)), (sid, doc_name))

    def __call__(self, item: _Item) -> Duplicate | None:
        key = self.key(item.tokens)
        if key in self.seen:
            return Duplicate(item.line, item.text, same_as_line=self.seen[key])
        if key in self.existing:
            sid, doc_name = self.existing[key]
            return Duplicate(
                item.line, item.text, same_as_sentence_id=sid, same_as_document=doc_name
            )
        self.seen[key] = item.line
        return None


def _find_duplicates(
    db: Session, corpus: Corpus | None, items: list[_Item]
) -> tuple[list[Duplicate], set[int]]:
    """Duplicates within the file and against the corpus; the set holds their item indexes."""
    check = DuplicateCheck(db, corpus, tuple)
    dups: list[Duplicate] = []
    indexes: set[int] = set()
    for index, item in enumerate(items):
        if (dup := check(item)) is not None:
            dups.append(dup)
            indexes.add(index)
    return dups, indexes


def _document(db: Session, corpus: Corpus, name: str) -> tuple[Document, bool]:
    doc = db.scalar(select(Document).where(Document.corpus_id == corpus.id, Document.name == name))
    if doc is not None:
        return doc, False
    last = db.scalar(
        select(func.coalesce(func.max(Document.position), -1)).where(
            Document.corpus_id == corpus.id
        )
    )
    position = int(last) + 1 if last is not None else 0
    doc = Document(corpus_id=corpus.id, name=name, position=position)
    db.add(doc)
    db.flush()
    return doc, True


def _annotator(db: Session, username: str | None) -> User:
    if not username:
        raise BadInput("importing trees as annotations needs the annotator's user name")
    user = db.scalar(select(User).where(User.username == username))
    if user is None:
        raise NotFound(f"no user named {username!r}")
    if not user.active:
        raise BadInput(f"the user {username!r} is disabled")
    return user


def import_bytes(
    db: Session,
    data: bytes,
    *,
    source: str,
    corpus_name: str,
    document_name: str | None = None,
    kind: str = "text",
    tokenizer: str = "whitespace",
    annotator: str | None = None,
    skip_duplicates: bool = False,
    create_corpus_if_missing: bool = True,
    user: User | None = None,
    progress: Progress | None = None,
    commit: bool = True,
) -> ImportResult:
    """Import one file's bytes. Everything is checked first, then written in one transaction.

    On any error the session is rolled back and the exception propagates: nothing of the file
    is stored. With ``commit=False`` the caller commits (and must roll back on error).
    """
    if kind not in KINDS:
        raise BadInput(f"unknown import kind {kind!r}; one of {', '.join(KINDS)}")
    document_name = clean_name(document_name or Path(source).stem, "document", MAX_DOCUMENT_NAME)
    text = decode(data, source)
    dropped = 0
    labels: set[str] = set()
    tags: set[str] = set()
    blank = 0
    if kind == "text":
        items, blank = read_text_items(text, source, tokenizer)
    else:
        items, dropped, labels, tags = read_tree_items(text, source)
    if not items:
        raise ImportFailed("no sentences found", source=source)
    try:
        result = _store(
            db,
            items,
            source=source,
            corpus_name=corpus_name,
            document_name=document_name,
            kind=kind,
            annotator=annotator,
            skip_duplicates=skip_duplicates,
            create=create_corpus_if_missing,
            user=user,
            progress=progress,
            labels=labels,
            tags=tags,
        )
        result.blank_lines = blank
        result.empty_elements_dropped = dropped
        if commit:
            db.commit()
        return result
    except BaseException:
        db.rollback()
        raise


def import_file(db: Session, path: Path, **options: Any) -> ImportResult:
    """:func:`import_bytes` on a file; the document name defaults to the file's stem."""
    try:
        data = path.read_bytes()
    except OSError as err:
        raise ImportFailed(f"cannot read the file: {err.strerror}", source=str(path)) from None
    options.setdefault("document_name", path.stem)
    return import_bytes(db, data, source=path.name, **options)


def _store(
    db: Session,
    items: list[_Item],
    *,
    source: str,
    corpus_name: str,
    document_name: str,
    kind: str,
    annotator: str | None,
    skip_duplicates: bool,
    create: bool,
    user: User | None,
    progress: Progress | None,
    labels: set[str],
    tags: set[str],
) -> ImportResult:
    ann_user = _annotator(db, annotator) if kind == "annotation" else None
    corpus = corpus_by_name(db, corpus_name)
    corpus_created = False
    if corpus is None:
        if not create:
            raise NotFound(f"no corpus named {corpus_name!r}")
        corpus = create_corpus.step(db, corpus_name, user=user)
        corpus_created = True
    doc, doc_created = _document(db, corpus, document_name)
    result = ImportResult(
        corpus_id=corpus.id,
        corpus_name=corpus.name,
        document_id=doc.id,
        document_name=doc.name,
        kind=kind,
        source=source,
        corpus_created=corpus_created,
        document_created=doc_created,
    )
    attach: dict[int, Sentence] = {}
    if ann_user is not None:
        attach = _attachable(db, doc, ann_user, items)
    dups, dup_indexes = _find_duplicates(
        db, corpus, [it for i, it in enumerate(items) if i not in attach]
    )
    # _find_duplicates saw the list without attached items; map its indexes back
    unattached = [i for i in range(len(items)) if i not in attach]
    dup_items = {unattached[i] for i in dup_indexes}
    result.duplicates = dups
    if kind != "text":
        absorb_tree_inventory(corpus, labels, tags)

    position = db.scalar(
        select(func.coalesce(func.max(Sentence.position), -1)).where(Sentence.document_id == doc.id)
    )
    next_position = (position if position is not None else -1) + 1
    total = len(items)
    now = utcnow()
    pending: list[tuple[_Item, Sentence, bool]] = []
    for index, item in enumerate(items):
        if index in dup_items and skip_duplicates:
            result.skipped_duplicates += 1
            continue
        if index in attach:
            pending.append((item, attach[index], False))
            result.attached += 1
            continue
        state = {"text": SENT_QUEUED, "gold": SENT_GOLD, "annotation": SENT_IN_PROGRESS}[kind]
        sentence = Sentence(
            corpus_id=corpus.id,
            document_id=doc.id,
            position=next_position,
            tokens=item.tokens,
            text=item.text,
            state=state,
            created_at=now,
        )
        next_position += 1
        pending.append((item, sentence, True))
    # Rows are written in batches: sentences first (one flush gives them ids), then the rows
    # that point at them. Progress counts sentences stored.
    fresh = [sentence for _, sentence, new in pending if new]
    result.imported = len(fresh)
    for start in range(0, len(fresh), BATCH):
        db.add_all(fresh[start : start + BATCH])
        db.flush()
        if progress:
            progress(min(start + BATCH, len(fresh)), total)
    if kind == "gold":
        db.add_all(
            Gold(
                sentence_id=sentence.id,
                tree=item.tree,
                provenance="import",
                note=f"imported from {source}, line {item.line}",
                created_at=now,
            )
            for item, sentence, _ in pending
        )
    elif ann_user is not None:
        _add_annotations(db, [(item, sentence) for item, sentence, _ in pending], ann_user, now)
    db.flush()
    if kind == "annotation":
        _route_complete(db, corpus, [sentence for _, sentence, _ in pending])
    elif kind == "gold" and result.imported:
        gold_added(db, corpus)  # the gold loop counts seed gold too
    if progress:
        progress(total, total)
    event = Event(
        user_id=user.id if user else None,
        kind="import",
        corpus_id=corpus.id,
        detail={
            "source": source,
            "document": doc.name,
            "kind": kind,
            "imported": result.imported,
            "attached": result.attached,
            "duplicates": len(dups),
            "annotator": annotator,
            "summary": result.summary(),
            "skipped_duplicates": result.skipped_duplicates,
            "duplicate_lines": [d.describe() for d in result.duplicates[:REPORT_DUPLICATES]],
        },
    )
    db.add(event)
    db.flush()
    result.event_id = event.id
    return result


#: How many duplicate lines an import's report keeps (the count is always whole).
REPORT_DUPLICATES = 200


@dataclass(frozen=True)
class ImportReport:
    """What the Transfer page shows after an import, read back from its event (so the page
    can be reloaded without importing the file again)."""

    corpus_id: int | None
    kind: str
    summary: str
    duplicates: int
    duplicate_lines: list[str]
    skipped_duplicates: int


def import_report(db: Session, event_id: int) -> ImportReport:
    """The report of the import recorded as event ``event_id``; NotFound for anything else."""
    event = db.get(Event, event_id)
    if event is None or event.kind != "import" or "summary" not in (event.detail or {}):
        raise NotFound(f"no import report {event_id}")
    d = event.detail
    return ImportReport(
        event.corpus_id,
        str(d.get("kind", "")),
        str(d["summary"]),
        int(d.get("duplicates", 0)),
        list(d.get("duplicate_lines", [])),
        int(d.get("skipped_duplicates", 0)),
    )


class AttachCheck:
    """Where an annotator's imported trees attach: a tree whose words equal a sentence of the
    document (not gold) that this annotator has not annotated yet goes on that sentence, the
    first free one in reading order. ``key`` turns tokens into what is compared (the tokens,
    or a digest when a streamed file must not hold every sentence). Call it once per item, in
    file order: it answers the id of the sentence the item attaches to, or None."""

    def __init__(
        self,
        db: Session,
        doc: Document | None,
        ann_user: User,
        key: Callable[[list[str]], Hashable],
    ) -> None:
        self.key = key
        self.free: dict[Hashable, list[int]] = {}
        if doc is None or doc.id is None:
            return
        taken = set(
            db.scalars(
                select(Annotation.sentence_id)
                .join(Sentence)
                .where(Sentence.document_id == doc.id, Annotation.user_id == ann_user.id)
            )
        )
        rows = db.execute(
            select(Sentence.id, Sentence.tokens)
            .where(Sentence.document_id == doc.id, Sentence.state != SENT_GOLD)
            .order_by(Sentence.position)
        )
        for sid, tokens in rows:
            if sid not in taken:
                self.free.setdefault(key(list(tokens)), []).append(sid)
        for queue in self.free.values():
            queue.reverse()  # pop() from the end gives the first in reading order

    def __call__(self, item: _Item) -> int | None:
        queue = self.free.get(self.key(item.tokens))
        return queue.pop() if queue else None


def _attachable(
    db: Session, doc: Document, ann_user: User, items: list[_Item]
) -> dict[int, Sentence]:
    """Items whose words equal a sentence of ``doc`` this annotator has not annotated yet."""
    check = AttachCheck(db, doc, ann_user, tuple)
    ids = {index: sid for index, item in enumerate(items) if (sid := check(item)) is not None}
    wanted = list(ids.values())
    loaded: dict[int, Sentence] = {}
    for start in range(0, len(wanted), BATCH):
        chunk = wanted[start : start + BATCH]
        loaded.update((s.id, s) for s in db.scalars(select(Sentence).where(Sentence.id.in_(chunk))))
    return {index: loaded[sid] for index, sid in ids.items()}


def _add_annotations(
    db: Session,
    rows: list[tuple[_Item, Sentence]],
    ann_user: User,
    now: Any,
    *,
    assign: bool = True,
) -> list[Any]:
    """A submitted annotation with one ``import`` revision per sentence, and the assignment
    (unless ``assign`` is false: a staged import assigns when it publishes). Answers the rows
    added."""
    assigned: set[int] = set()
    ids = [sentence.id for _, sentence in rows] if assign else []
    for start in range(0, len(ids), BATCH):
        assigned |= set(
            db.scalars(
                select(Assignment.sentence_id).where(
                    Assignment.user_id == ann_user.id,
                    Assignment.sentence_id.in_(ids[start : start + BATCH]),
                )
            )
        )
    annotations = []
    for _, sentence in rows:
        if assign and sentence.id not in assigned:
            db.add(
                Assignment(
                    sentence_id=sentence.id,
                    user_id=ann_user.id,
                    created_at=now,
                    corpus_id=sentence.corpus_id,
                    rank=reading_rank(sentence.document_id, sentence.position),
                )
            )
        annotations.append(
            Annotation(
                sentence_id=sentence.id,
                user_id=ann_user.id,
                state=ANN_SUBMITTED,
                head=1,
                created_at=now,
                updated_at=now,
                submitted_at=now,
                comment="",
            )
        )
        if sentence.state == SENT_QUEUED:
            sentence.state = SENT_IN_PROGRESS
    db.add_all(annotations)
    db.flush()
    revisions = [
        Revision(
            annotation_id=annotation.id,
            number=1,
            tree=item.tree,
            source="import",
            user_id=ann_user.id,
            created_at=now,
            pins={},
        )
        for (item, _), annotation in zip(rows, annotations, strict=True)
    ]
    db.add_all(revisions)
    return [*annotations, *revisions]


def _route_complete(db: Session, corpus: Corpus, sentences: list[Sentence]) -> None:
    """Hand sentences that now have N submitted annotations to the agreement service.

    A sentence with fewer (one annotator's file alone) stays in progress: it waits for the
    other annotators, whom the assignment service adds.
    """
    needed = corpus.options.annotators_per_sentence
    ids = [s.id for s in sentences]
    if not ids:
        return
    counts: dict[int, int] = {}
    for start in range(0, len(ids), BATCH):
        counts.update(
            {
                sid: n
                for sid, n in db.execute(
                    select(Annotation.sentence_id, func.count())
                    .where(
                        Annotation.sentence_id.in_(ids[start : start + BATCH]),
                        Annotation.state == ANN_SUBMITTED,
                    )
                    .group_by(Annotation.sentence_id)
                )
            }
        )
    ready = [s for s in sentences if counts.get(s.id, 0) >= needed]
    if not ready:
        return
    for sentence in ready:
        agreement.on_submitted(db, sentence)
