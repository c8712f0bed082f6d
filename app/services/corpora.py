"""Corpora: creation with a label set and tag set, settings, overview counts, removal.

A corpus's *label set* holds the phrasal labels as annotators write them (function tags
included, ``NP-SBJ`` beside ``NP``; never the empty wrapper label) and its *tag set* the POS
tags. When a corpus is created without them, they are *derived*: every bracketed import adds
the labels and tags its trees use (:func:`absorb_tree_inventory`). An empty set allows every
label (the Bench checks labels only against a non-empty set). :data:`PTB_LABELS` and
:data:`PTB_TAGS` are offered as a starting point when a corpus is created by hand. Explicit
sets stay as given.

Removing a corpus needs its exact name typed as confirmation; the database's ON DELETE
CASCADE removes documents, sentences, annotations, revisions, gold, grammars and suggestions in
the same transaction.

Cost: counts are read from ``sentence_counts`` (kept by triggers, :mod:`app.counts`): O(documents)
rows, not O(sentences). A sentence page is a keyset page in reading order (document id, then
position: see :class:`app.models.Sentence`): an index range of ``per_page`` rows wherever it
is in the corpus. ``page=N`` (offset) is still accepted by the JSON API and costs O(N).
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any, cast

from nltk import Tree
from sqlalchemy import delete, func, select, tuple_
from sqlalchemy.orm import Session

from app.corpus_settings import (
    EDITABLE,
    CorpusSettings,
    LabelPolicy,
    SettingError,
    SettleOwnPolicy,
    bounds,
    checked_update,
)
from app.models import (
    SENTENCE_STATES,
    Assignment,
    Corpus,
    Document,
    Event,
    Gold,
    Sentence,
    SentenceCount,
    User,
)
from app.services.errors import BadInput, Conflict, NotFound
from app.services.queue_order import apply_order
from app.services.transactions import unit_of_work

# Phrase labels of Treebank II bracketing (Bies, Ferguson, Katz and MacIntyre 1995, "Bracketing
# Guidelines for Treebank II Style", clause and phrase level labels; from memory) plus NML
# (Vadas and Curran 2007; from memory) and the ROOT wrapper (common practice, no source).
PTB_LABELS: tuple[str, ...] = tuple(
    "ROOT S SBAR SBARQ SINV SQ ADJP ADVP CONJP FRAG INTJ LST NAC NML NP NX PP PRN PRT QP RRC "
    "UCP VP WHADJP WHADVP WHNP WHPP X".split()
)
# POS tags of the Penn Treebank (Marcus, Santorini and Marcinkiewicz 1993, Computational
# Linguistics 19(2), the POS tag table; from memory), with HYPH and NFP as GUM uses them.
PTB_TAGS: tuple[str, ...] = tuple(
    "CC CD DT EX FW IN JJ JJR JJS LS MD NN NNS NNP NNPS PDT POS PRP PRP$ RB RBR RBS RP SYM TO "
    "UH VB VBD VBG VBN VBP VBZ WDT WP WP$ WRB # $ . , : `` '' -LRB- -RRB- HYPH NFP".split()
)

LABEL_POLICIES = tuple(p.value for p in LabelPolicy)
#: Who may settle a sentence they annotated (see app.services.review.check_own_settle).
SETTLE_OWN_POLICIES = tuple(p.value for p in SettleOwnPolicy)
MAX_NAME = 128
_LABEL_RE = re.compile(r"^[^\s()]+$")
#: Settings key that records whether the label and tag sets grow with imports.
DERIVED_KEY = "derive_inventory"


@dataclass(frozen=True)
class SettingSpec:
    """One editable corpus setting as the corpus page shows it: type, bounds and help (all
    read from :class:`app.corpus_settings.CorpusSettings`, where they are defined)."""

    key: str
    kind: type
    low: float | None
    high: float | None
    help: str


def _spec(key: str) -> SettingSpec:
    field_info = CorpusSettings.model_fields[key]
    low, high = bounds(key)
    kind = field_info.annotation if field_info.annotation in (int, float, bool) else str
    return SettingSpec(key, cast(type, kind), low, high, field_info.description or "")


SETTING_SPECS: dict[str, SettingSpec] = {key: _spec(key) for key in EDITABLE}


def _control_character(text: str) -> tuple[int, str] | None:
    """The first control character of ``text`` (position from 1, its code), if any."""
    for position, char in enumerate(text, start=1):
        if unicodedata.category(char) in ("Cc", "Cs"):
            return position, f"U+{ord(char):04X}"
    return None


def clean_name(name: str, what: str = "corpus", limit: int = MAX_NAME) -> str:
    """``name`` with runs of whitespace made single; empty, too long or holding a control
    character (NUL, escape...: they cannot be typed, shown or searched) is an error."""
    cleaned = " ".join((name or "").split())
    if not cleaned:
        raise BadInput(f"a {what} needs a name")
    if len(cleaned) > limit:
        raise BadInput(f"a {what} name has at most {limit} characters, not {len(cleaned)}")
    bad = _control_character(cleaned)
    if bad is not None:
        raise BadInput(
            f"a {what} name cannot hold the control character {bad[1]} (character {bad[0]})"
        )
    return cleaned


#: The most labels (or tags) a corpus's set may list; treebank label sets, function tags
#: included, run to a few hundred (common practice, no source).
MAX_INVENTORY = 5_000


def _check_inventory(items: Iterable[str], what: str) -> list[str]:
    """The entries in order, without repeats; linear in their number (a set for the
    repeats), at most MAX_INVENTORY of them."""
    out: list[str] = []
    seen: set[str] = set()
    for position, item in enumerate(items, start=1):
        item = item.strip()
        if not item:
            continue
        if not _LABEL_RE.match(item):
            raise BadInput(f"{what} entry {position} {item!r} has a space or a bracket")
        bad = _control_character(item)
        if bad is not None:
            raise BadInput(f"{what} entry {position} holds the control character {bad[1]}")
        if item not in seen:
            seen.add(item)
            out.append(item)
            if len(out) > MAX_INVENTORY:
                raise BadInput(
                    f"a {what} lists at most {MAX_INVENTORY:,} entries; entry "
                    f"{position} is one more"
                )
    return out


def parse_inventory(text: str) -> list[str]:
    """A label or tag list typed as text, separated by spaces, commas or line breaks."""
    return [item for item in re.split(r"[\s,]+", text or "") if item]


@unit_of_work
def create_corpus(
    db: Session,
    name: str,
    *,
    description: str = "",
    label_set: Iterable[str] | None = None,
    tag_set: Iterable[str] | None = None,
    settings: dict[str, Any] | None = None,
    user: User | None = None,
) -> Corpus:
    """A new, empty corpus. Without ``label_set``/``tag_set`` both are derived from imports.
    Commits (``create_corpus.step`` does not)."""
    name = clean_name(name)
    if db.scalar(select(Corpus.id).where(Corpus.name == name)) is not None:
        raise Conflict(f"a corpus named {name!r} exists already")
    labels = _check_inventory(label_set, "label set") if label_set is not None else []
    tags = _check_inventory(tag_set, "tag set") if tag_set is not None else []
    values = validate_settings(settings or {})
    values[DERIVED_KEY] = label_set is None and tag_set is None
    corpus = Corpus(
        name=name, description=description.strip(), label_set=labels, tag_set=tags, settings=values
    )
    db.add(corpus)
    db.flush()
    db.add(
        Event(
            user_id=user.id if user else None,
            kind="corpus_created",
            corpus_id=corpus.id,
            detail={"name": name},
        )
    )
    return corpus


#: In a staging corpus's settings (app.services.staged_import): the source being imported.
#: Such a corpus holds an import until it is published; nobody sees it.
STAGING_KEY = "staging_import"


def is_staging(corpus: Corpus) -> bool:
    return bool((corpus.settings or {}).get(STAGING_KEY))


def corpus_by_name(db: Session, name: str) -> Corpus | None:
    return db.scalar(select(Corpus).where(Corpus.name == " ".join(name.split())))


def get_corpus(db: Session, corpus_id: int, *, fresh: bool = False) -> Corpus:
    """The corpus with this id (re-read from the database with ``fresh``); NotFound."""
    corpus = find_corpus(db, corpus_id, fresh=fresh)
    if corpus is None:
        raise NotFound(f"no corpus with id {corpus_id}")
    return corpus


def tree_inventory(trees: Iterable[Tree]) -> tuple[set[str], set[str]]:
    """(phrasal labels, POS tags) used in ``trees``; the empty wrapper label is left out."""
    labels: set[str] = set()
    tags: set[str] = set()
    for tree in trees:
        stack = [tree]
        while stack:
            node = stack.pop()
            if len(node) == 1 and isinstance(node[0], str):
                tags.add(node.label())
                continue
            if node.label():
                labels.add(node.label())
            stack.extend(child for child in node if isinstance(child, Tree))
    return labels, tags


def absorb_tree_inventory(corpus: Corpus, labels: set[str], tags: set[str]) -> None:
    """Add labels and tags to a derived inventory (explicit ones are left alone)."""
    if not corpus.options.derive_inventory:
        return
    corpus.label_set = sorted(set(corpus.label_set or []) | labels)
    corpus.tag_set = sorted(set(corpus.tag_set or []) | tags)


def validate_settings(
    values: dict[str, Any], current: dict[str, Any] | None = None
) -> dict[str, Any]:
    """The stored settings after ``values`` are applied to ``current``, checked and typed;
    BadInput naming the setting for an unknown key or a bad value."""
    try:
        return checked_update(current, values)
    except SettingError as exc:
        raise BadInput(str(exc), setting=exc.key) from None


def effective_settings(corpus: Corpus) -> dict[str, Any]:
    """Every editable setting with its value for this corpus (defaults filled in)."""
    values = corpus.options.model_dump(mode="json")
    return {key: values[key] for key in EDITABLE}


@unit_of_work
def update_corpus(
    db: Session,
    corpus: Corpus,
    *,
    settings: dict[str, Any] | None = None,
    description: str | None = None,
    label_set: Iterable[str] | None = None,
    tag_set: Iterable[str] | None = None,
    user: User | None = None,
) -> Corpus:
    """Change settings, description or inventories. Explicit inventories stop derivation.
    Commits."""
    merged = validate_settings(settings or {}, corpus.settings)
    for attribute, given in (("label_set", label_set), ("tag_set", tag_set)):
        if given is None:
            continue
        what = attribute.replace("_", " ")
        items = _check_inventory(given, what)
        if not items:
            raise BadInput(f"the {what} cannot be empty")
        setattr(corpus, attribute, items)
        merged[DERIVED_KEY] = False
    if description is not None:
        corpus.description = description.strip()
    reorder = merged.get("queue_order") != (corpus.settings or {}).get("queue_order")
    corpus.settings = merged
    if reorder:
        db.flush()
        apply_order(db, corpus.id)
    db.add(
        Event(
            user_id=user.id if user else None,
            kind="corpus_settings",
            corpus_id=corpus.id,
            detail={
                "settings": settings or {},
                "label_set": label_set is not None,
                "tag_set": tag_set is not None,
            },
        )
    )
    db.flush()
    return corpus


@unit_of_work
def delete_corpus(db: Session, corpus_id: int, typed_name: str, user: User | None = None) -> str:
    """Remove a corpus and everything in it, only when ``typed_name`` is exactly its name.
    Commits."""
    corpus = get_corpus(db, corpus_id)
    if (typed_name or "").strip() != corpus.name:
        raise BadInput(f"to remove the corpus type its name exactly: {corpus.name!r}")
    name = corpus.name
    db.expunge(corpus)
    db.execute(delete(Corpus).where(Corpus.id == corpus_id))
    db.add(
        Event(
            user_id=user.id if user else None,
            kind="corpus_removed",
            detail={"name": name, "corpus_id": corpus_id},
        )
    )
    db.flush()
    return name


# ---------------------------------------------------------------------------------------------
# overview and sentence pages


@dataclass
class CorpusCounts:
    corpus: Corpus
    states: dict[str, int] = field(default_factory=lambda: dict.fromkeys(SENTENCE_STATES, 0))
    gold: int = 0
    documents: int = 0

    @property
    def sentences(self) -> int:
        return sum(self.states.values())


def _state_counts(db: Session, *where: Any) -> dict[tuple[int, str], int]:
    rows = db.execute(
        select(SentenceCount.corpus_id, SentenceCount.state, func.sum(SentenceCount.n))
        .where(*where)
        .group_by(SentenceCount.corpus_id, SentenceCount.state)
    )
    return {(cid, state): int(n or 0) for cid, state, n in rows}


def _gold_counts(db: Session, corpus_id: int | None = None) -> dict[int, int]:
    """Sentences with a current gold tree per corpus. Driven from the gold table (the
    corpus looked up per gold row): O(gold rows), never a scan of every sentence."""
    corpus_of = select(Sentence.corpus_id).where(Sentence.id == Gold.sentence_id).scalar_subquery()
    stmt = (
        select(corpus_of, func.count(func.distinct(Gold.sentence_id)))
        .where(Gold.retired_at.is_(None))
        .group_by(corpus_of)
    )
    if corpus_id is not None:
        stmt = stmt.where(corpus_of == corpus_id)
    return {cid: n for cid, n in db.execute(stmt)}


def corpus_overview(db: Session) -> list[CorpusCounts]:
    """Every corpus with its sentence count per state, gold count and document count."""
    corpora = [c for c in db.scalars(select(Corpus).order_by(Corpus.name)) if not is_staging(c)]
    states = _state_counts(db)
    gold = _gold_counts(db)
    docs = dict(
        db.execute(select(Document.corpus_id, func.count()).group_by(Document.corpus_id)).all()
    )
    out = []
    for corpus in corpora:
        counts = CorpusCounts(
            corpus=corpus, gold=gold.get(corpus.id, 0), documents=docs.get(corpus.id, 0)
        )
        for state in SENTENCE_STATES:
            counts.states[state] = states.get((corpus.id, state), 0)
        out.append(counts)
    return out


def corpus_counts(db: Session, corpus: Corpus) -> CorpusCounts:
    states = _state_counts(db, SentenceCount.corpus_id == corpus.id)
    counts = CorpusCounts(
        corpus=corpus,
        gold=_gold_counts(db, corpus.id).get(corpus.id, 0),
        documents=db.scalar(
            select(func.count()).select_from(Document).where(Document.corpus_id == corpus.id)
        )
        or 0,
    )
    for state in SENTENCE_STATES:
        counts.states[state] = states.get((corpus.id, state), 0)
    return counts


@dataclass
class DocumentRow:
    document: Document
    sentences: int
    states: dict[str, int]


def _with_counts(db: Session, corpus: Corpus, docs: list[Document]) -> list[DocumentRow]:
    where = [SentenceCount.corpus_id == corpus.id]
    if len(docs) <= DOCUMENTS_PER_PAGE_MAX:  # one page: only its documents' count rows
        where.append(SentenceCount.document_id.in_([d.id for d in docs]))
    rows = db.execute(
        select(SentenceCount.document_id, SentenceCount.state, SentenceCount.n).where(*where)
    )
    per_doc: dict[int, dict[str, int]] = {}
    for doc_id, state, n in rows:
        per_doc.setdefault(doc_id, dict.fromkeys(SENTENCE_STATES, 0))[state] = n
    return [
        DocumentRow(
            document=d,
            states=per_doc.get(d.id, dict.fromkeys(SENTENCE_STATES, 0)),
            sentences=sum(per_doc.get(d.id, {}).values()),
        )
        for d in docs
    ]


#: The most documents one page of the corpus page shows.
DOCUMENTS_PER_PAGE_MAX = 500


@dataclass
class DocumentPage:
    """One page of a corpus's documents in their order, with cursors (``POSITION-ID``) to the
    pages before (``prev_cursor``, pass as ``before``) and after (``next_cursor``, ``after``)."""

    rows: list[DocumentRow]
    total: int
    per_page: int
    prev_cursor: str | None = None
    next_cursor: str | None = None


def _document_cursor(doc: Document) -> str:
    return f"{doc.position}-{doc.id}"


def document_page(
    db: Session,
    corpus: Corpus,
    *,
    per_page: int = 50,
    after: str | None = None,
    before: str | None = None,
) -> DocumentPage:
    """One page of the corpus's documents (keyset on position, then id): the first, or the
    one ``after`` / ``before`` a cursor. Cost: one page of documents and their count rows,
    plus a count of the corpus's documents (an index range)."""
    per_page = min(max(per_page, 1), DOCUMENTS_PER_PAGE_MAX)
    key = tuple_(Document.position, Document.id)
    stmt = select(Document).where(Document.corpus_id == corpus.id)
    if before is not None:
        docs = list(
            db.scalars(
                stmt.where(key < tuple_(*parse_document_cursor(before)))
                .order_by(Document.position.desc(), Document.id.desc())
                .limit(per_page + 1)
            )
        )
        has_prev, has_next = len(docs) > per_page, True
        docs = docs[:per_page][::-1]
    else:
        if after is not None:
            stmt = stmt.where(key > tuple_(*parse_document_cursor(after)))
        docs = list(db.scalars(stmt.order_by(Document.position, Document.id).limit(per_page + 1)))
        has_prev, has_next = after is not None, len(docs) > per_page
        docs = docs[:per_page]
    total = db.scalar(
        select(func.count()).select_from(Document).where(Document.corpus_id == corpus.id)
    )
    return DocumentPage(
        rows=_with_counts(db, corpus, docs),
        total=int(total or 0),
        per_page=per_page,
        prev_cursor=_document_cursor(docs[0]) if docs and has_prev else None,
        next_cursor=_document_cursor(docs[-1]) if docs and has_next else None,
    )


def find_document(db: Session, corpus: Corpus, document_id: int) -> Document | None:
    """The corpus's document with this id, or None."""
    return db.scalar(
        select(Document).where(Document.id == document_id, Document.corpus_id == corpus.id)
    )


def parse_document_cursor(cursor: str) -> tuple[int, int]:
    """The (position, id) of a document cursor, or BadInput."""
    parts = cursor.split("-")
    if len(parts) != 2 or not all(p.isdigit() and len(p) < 19 for p in parts):
        raise BadInput(
            f"document cursor {cursor[:40]!r} is not of the form POSITION-ID (two whole numbers)"
        )
    return int(parts[0]), int(parts[1])


@dataclass
class SentenceRow:
    sentence: Sentence
    document_name: str
    assignees: list[str]


@dataclass
class SentencePage:
    """One page of sentences. Keyset pages carry cursors: ``prev_cursor`` (pass as
    ``before``) when earlier rows exist, ``next_cursor`` (pass as ``after``) when later ones
    do; an offset page (``page=N``) has its number instead."""

    rows: list[SentenceRow]
    per_page: int
    total: int
    prev_cursor: str | None = None
    next_cursor: str | None = None
    page: int | None = None

    @property
    def pages(self) -> int:
        return max(1, -(-self.total // self.per_page))


def sentence_cursor(sentence: Sentence) -> str:
    """A sentence's place in reading order as a cursor: ``DOCUMENT-POSITION``."""
    return f"{sentence.document_id}-{sentence.position}"


def parse_cursor(cursor: str, what: str = "cursor") -> tuple[int, int]:
    """The (document id, position) of a cursor, or BadInput saying what is wrong."""
    parts = cursor.split("-")
    if len(parts) != 2 or not all(p.isdigit() and len(p) < 19 for p in parts):
        raise BadInput(
            f"{what} {cursor[:40]!r} is not of the form DOCUMENT-POSITION (two whole numbers)"
        )
    return int(parts[0]), int(parts[1])


def sentence_count(
    db: Session, corpus: Corpus, *, state: str | None = None, document_id: int | None = None
) -> int:
    """How many sentences of the corpus (in ``state``, in the document), from the counts."""
    where = [SentenceCount.corpus_id == corpus.id]
    if state:
        where.append(SentenceCount.state == state)
    if document_id is not None:
        where.append(SentenceCount.document_id == document_id)
    return int(db.scalar(select(func.coalesce(func.sum(SentenceCount.n), 0)).where(*where)) or 0)


def sentence_page(
    db: Session,
    corpus: Corpus,
    *,
    per_page: int = 50,
    state: str | None = None,
    document_id: int | None = None,
    after: str | None = None,
    before: str | None = None,
    last: bool = False,
    page: int | None = None,
) -> SentencePage:
    """One page of the corpus's sentences in reading order, with who is assigned to each:
    the first page; the page ``after`` or ``before`` a cursor; the ``last`` page; or (JSON API)
    offset page number ``page``."""
    if state and state not in SENTENCE_STATES:
        raise BadInput(f"unknown sentence state {state!r}; one of {', '.join(SENTENCE_STATES)}")
    per_page = min(max(per_page, 1), 500)
    where = [Sentence.corpus_id == corpus.id]
    if state:
        where.append(Sentence.state == state)
    if document_id is not None:
        if (
            db.scalar(
                select(Document.id).where(
                    Document.id == document_id, Document.corpus_id == corpus.id
                )
            )
            is None
        ):
            raise NotFound(f"no document with id {document_id} in corpus {corpus.name!r}")
        where.append(Sentence.document_id == document_id)
    total = sentence_count(db, corpus, state=state, document_id=document_id)
    key = tuple_(Sentence.document_id, Sentence.position)
    stmt = select(Sentence, Document.name).join(Document).where(*where)
    forward = (Sentence.document_id, Sentence.position)
    backward = (Sentence.document_id.desc(), Sentence.position.desc())
    has_prev = has_next = False
    if page is not None:
        page = max(page, 1)
        rows = list(
            db.execute(stmt.order_by(*forward).limit(per_page).offset((page - 1) * per_page)).all()
        )
        has_prev, has_next = page > 1, (page - 1) * per_page + len(rows) < total
    elif before is not None:
        rows = list(
            db.execute(
                stmt.where(key < tuple_(*parse_cursor(before, "before")))
                .order_by(*backward)
                .limit(per_page + 1)
            ).all()
        )
        has_prev, has_next = len(rows) > per_page, True
        rows = rows[:per_page][::-1]
    elif last:
        rows = list(db.execute(stmt.order_by(*backward).limit(per_page + 1)).all())
        has_prev = len(rows) > per_page
        rows = rows[:per_page][::-1]
    else:
        if after is not None:
            stmt = stmt.where(key > tuple_(*parse_cursor(after, "after")))
        rows = list(db.execute(stmt.order_by(*forward).limit(per_page + 1)).all())
        has_prev, has_next = after is not None, len(rows) > per_page
        rows = rows[:per_page]
    ids = [s.id for s, _ in rows]
    who: dict[int, list[str]] = {}
    if ids:
        for sid, username in db.execute(
            select(Assignment.sentence_id, User.username)
            .join(User, User.id == Assignment.user_id)
            .where(Assignment.sentence_id.in_(ids))
            .order_by(User.username)
        ):
            who.setdefault(sid, []).append(username)
    return SentencePage(
        rows=[SentenceRow(s, name, who.get(s.id, [])) for s, name in rows],
        per_page=per_page,
        total=total,
        page=page,
        prev_cursor=sentence_cursor(rows[0][0]) if rows and has_prev else None,
        next_cursor=sentence_cursor(rows[-1][0]) if rows and has_next else None,
    )


def find_corpus(db: Session, corpus_id: int, *, fresh: bool = False) -> Corpus | None:
    """The corpus with this id, or None; ``fresh`` re-reads a row this session holds."""
    return db.get(Corpus, corpus_id, populate_existing=fresh)


def corpus_list(db: Session) -> list[Corpus]:
    """Every corpus, by name (not those holding an import still being staged)."""
    return [c for c in db.scalars(select(Corpus).order_by(Corpus.name)) if not is_staging(c)]


def document_choices(db: Session) -> list[tuple[int, str, int]]:
    """(id, name, corpus id) of every document, by corpus and position."""
    return [
        (i, n, c)
        for i, n, c in db.execute(
            select(Document.id, Document.name, Document.corpus_id).order_by(
                Document.corpus_id, Document.position
            )
        )
    ]
