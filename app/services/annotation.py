"""Annotations on the Bench: opening, validated append-only saves, submit, notes, the Queue.

Rules this module enforces (routes only translate its errors into HTTP answers):

* **Blind**: a user reaches a sentence here only through an Assignment row of their own; every
  other sentence (absent, or assigned to someone else only) answers 404 with the same message,
  so an annotator cannot even learn which ids exist. There is no call that takes an annotation
  id: a user can only ever read or write *their own* annotation of a sentence.
* **Append-only**: each save inserts ``Revision(number=head + 1)`` and moves ``head`` with a
  compare-and-set ``UPDATE ... WHERE head = base``; a save based on an older head, or one that
  loses a race (the unique (annotation_id, number) pair), raises :class:`Conflict` carrying the
  current revision, and nothing is written.
* **Valid trees only**: :func:`validate_tree_text` reads the bracketed text with
  :func:`parser.trees.read_tree`, checks the words against the sentence's tokens and the labels
  against the corpus's label and tag sets (policy ``refuse`` or ``confirm``).
* **Submit** marks the annotation submitted and calls ``app.services.agreement.on_submitted``
  in the same transaction; a submitted annotation takes no further saves.

Cost: a save is one read of the annotation, one validation (linear in the text length) and two
writes; a page of the Queue, and a sentence's place in it, are walks of one index over the
user's assignments (see "the queue" below), whatever the queue's length.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import UTC
from typing import Any, cast

from sqlalchemy import CursorResult, func, select, tuple_, update
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from app.models import (
    ANN_DRAFT,
    ANN_FLAGGED,
    ANN_SUBMITTED,
    QUEUE_BLOCK_BITS,
    REV_SOURCES,
    SENT_DROPPED,
    SENT_GOLD,
    SENT_HELD_BACK,
    SENT_IN_PROGRESS,
    SENT_IN_REVIEW,
    SENT_QUEUED,
    Annotation,
    Assignment,
    Corpus,
    Document,
    Event,
    QueueBlock,
    QueueCount,
    Revision,
    Sentence,
    User,
    utcnow,
)
from app.services import agreement
from app.services.errors import BadInput, Conflict, NotFound
from app.services.gold import current_revision
from app.services.held import open_state, still_held
from app.services.queue_order import unfinished
from app.services.suggestions import record_start
from app.services.validation import (
    MAX_TREE_CHARS,
    stored_words,
    unknown_labels,
    validate_actions,
    validate_pins,
    validate_tree_text,
)
from parser.errors import ParserError
from parser.trees import read_tree, write_tree

#: Longest comment and flag reason.
MAX_COMMENT_CHARS = 4_000
MAX_FLAG_CHARS = 64


# --------------------------------------------------------------------------- access
def assigned_sentence(db: Session, user: User, sentence_id: int) -> Sentence:
    """The sentence if it is assigned to ``user``; NotFound otherwise (same message whether the
    sentence is absent or someone else's, so nothing leaks)."""
    sentence = db.scalar(
        select(Sentence)
        .join(Assignment, Assignment.sentence_id == Sentence.id)
        .where(Sentence.id == sentence_id, Assignment.user_id == user.id)
    )
    if sentence is None:
        raise NotFound(f"sentence {sentence_id} is not in your queue")
    return sentence


def own_annotation(db: Session, user: User, sentence: Sentence) -> Annotation | None:
    return db.scalar(
        select(Annotation).where(
            Annotation.sentence_id == sentence.id, Annotation.user_id == user.id
        )
    )


def own_revisions(db: Session, user: User, sentence: Sentence) -> list[Revision]:
    """Every saved revision of ``user``'s annotation of ``sentence``, newest first."""
    annotation = own_annotation(db, user, sentence)
    if annotation is None:
        return []
    return list(
        db.scalars(
            select(Revision)
            .where(Revision.annotation_id == annotation.id)
            .order_by(Revision.number.desc())
        )
    )


# --------------------------------------------------------------------------- saving
@dataclass
class SaveResult:
    annotation: Annotation
    revision: Revision


def revision_view(revision: Revision | None) -> dict[str, Any] | None:
    """What a 409 answer carries about the current revision (JSON-ready)."""
    if revision is None:
        return None
    return {
        "number": revision.number,
        "tree": revision.tree,
        "pins": revision.pins or {},
        "source": revision.source,
        "created_at": revision.created_at.replace(tzinfo=UTC).isoformat(),
    }


def _conflict(db: Session, user: User, sentence: Sentence, why: str) -> Conflict:
    db.rollback()
    annotation = own_annotation(db, user, sentence)
    current = current_revision(db, annotation)
    return Conflict(
        why,
        current=revision_view(current),
        head=annotation.head if annotation else 0,
        state=annotation.state if annotation else ANN_DRAFT,
    )


def _check_open(db: Session, user: User, sentence: Sentence) -> None:
    """A sentence in review, gold or dropped takes no more annotation (the Bench shows it read
    only)."""
    if sentence.state in (SENT_IN_REVIEW, SENT_GOLD, SENT_DROPPED):
        raise _conflict(
            db,
            user,
            sentence,
            f"this sentence is {sentence.state.replace('_', ' ')}"
            "; annotations of it take no more changes",
        )


def _new_annotation(db: Session, user: User, sentence: Sentence) -> Annotation:
    """Create the user's (empty) annotation; a concurrent creation wins and this is a 409."""
    annotation = Annotation(sentence_id=sentence.id, user_id=user.id, state=ANN_DRAFT, head=0)
    record_start(db, annotation, sentence)
    db.add(annotation)
    try:
        db.flush()
    except IntegrityError:
        raise _conflict(
            db, user, sentence, "another request created this annotation first; try again"
        ) from None
    return annotation


def save_revision(
    db: Session,
    user: User,
    sentence: Sentence,
    *,
    base: int,
    tree_text: str,
    pins: dict[str, Any] | None = None,
    source: str = "edit",
    confirm_labels: bool = False,
    active_seconds: float = 0.0,
    actions: dict[str, int] | None = None,
    start_tree: str | None = None,
) -> SaveResult:
    """Append a revision to ``user``'s annotation of ``sentence`` (created on first save).

    ``base`` is the head the client's change was built on; anything else is a Conflict
    carrying the current revision. Commits on success.
    """
    if source not in REV_SOURCES:
        raise BadInput(
            f"unknown revision source {source!r}; one of {', '.join(REV_SOURCES)}", kind="shape"
        )
    corpus = db.get(Corpus, sentence.corpus_id)
    if corpus is None:  # cannot happen while the foreign key holds; say so rather than crash
        raise NotFound(f"sentence {sentence.id} has no corpus")
    tree = validate_tree_text(sentence, tree_text, corpus, confirm_labels=confirm_labels)
    clean_pins = validate_pins(tree, pins or {})
    annotation = own_annotation(db, user, sentence)
    if annotation is None:
        if base != 0:
            raise _conflict(
                db,
                user,
                sentence,
                f"save based on revision {base}, but you have no saved revision of this sentence",
            )
        annotation = _new_annotation(db, user, sentence)
    if annotation.state == ANN_SUBMITTED:
        raise _conflict(
            db, user, sentence, "this annotation is submitted and takes no more changes"
        )
    _check_open(db, user, sentence)
    if base != annotation.head:
        raise _conflict(
            db,
            user,
            sentence,
            f"save based on revision {base}, but the newest is revision {annotation.head}",
        )
    now = utcnow()
    moved = db.execute(
        update(Annotation)
        .where(Annotation.id == annotation.id, Annotation.head == base)
        .values(head=base + 1, updated_at=now)
        .execution_options(synchronize_session=False)
    )
    if cast(CursorResult[Any], moved).rowcount != 1:
        raise _conflict(db, user, sentence, "another save of this annotation came first")
    revision = Revision(
        annotation_id=annotation.id,
        number=base + 1,
        tree=write_tree(tree),
        pins=clean_pins,
        source=source,
        user_id=user.id,
        created_at=now,
        token_version=sentence.token_version,
        active_seconds=float(active_seconds),
        actions=validate_actions(actions),
    )
    if start_tree is not None and annotation.start_tree is None:
        annotation.start_tree = _clean_start(start_tree)
    db.add(revision)
    if sentence.state == SENT_QUEUED:
        sentence.state = SENT_IN_PROGRESS
    try:
        db.commit()
    except IntegrityError:
        raise _conflict(db, user, sentence, "another save of this annotation came first") from None
    db.refresh(annotation)
    return SaveResult(annotation=annotation, revision=revision)


def _clean_start(text: str) -> str:
    try:
        return write_tree(read_tree(text))
    except ParserError as exc:
        raise BadInput(f"the start tree is not a bracketed tree: {exc}", kind="shape") from None


def submit(db: Session, user: User, sentence: Sentence, *, base: int) -> Annotation:
    """Mark the annotation submitted (its head must be ``base``) and let agreement run."""
    annotation = own_annotation(db, user, sentence)
    if annotation is None or annotation.head == 0:
        raise BadInput("nothing to submit: save a tree first", kind="state")
    if annotation.state == ANN_SUBMITTED:
        raise _conflict(db, user, sentence, "this annotation is already submitted")
    _check_open(db, user, sentence)
    if base != annotation.head:
        raise _conflict(
            db,
            user,
            sentence,
            f"submit based on revision {base}, but the newest is revision {annotation.head}",
        )
    now = utcnow()
    moved = db.execute(
        update(Annotation)
        .where(
            Annotation.id == annotation.id,
            Annotation.head == base,
            Annotation.state != ANN_SUBMITTED,
        )
        .values(state=ANN_SUBMITTED, submitted_at=now, updated_at=now)
        .execution_options(synchronize_session=False)
    )
    if cast(CursorResult[Any], moved).rowcount != 1:
        raise _conflict(db, user, sentence, "the annotation changed while submitting")
    db.add(
        Event(
            user_id=user.id,
            kind="annotation.submitted",
            corpus_id=sentence.corpus_id,
            sentence_id=sentence.id,
            detail={"revision": base},
        )
    )
    db.flush()
    db.refresh(annotation)
    _agreement_hook(db, sentence)
    db.commit()
    db.refresh(annotation)
    return annotation


def _agreement_hook(db: Session, sentence: Sentence) -> None:
    # The agreement service owns what happens once every assigned annotation is in.
    agreement.on_submitted(db, sentence)


def set_note(
    db: Session,
    user: User,
    sentence: Sentence,
    *,
    comment: str | None,
    flag: str | None,
    clear_flag: bool = False,
) -> Annotation:
    """Store the annotator's comment and/or flag reason. A flag sets the state ``flagged``
    (the annotator holds the sentence back instead of submitting) and the sentence's state
    ``held_back`` (see app.services.held for the ways out); ``clear_flag`` returns the
    annotation to ``draft`` and, when no other hold is on it, the sentence to annotation.
    Works before the first save too (the annotation is created without revisions)."""

    if comment is not None and len(comment) > MAX_COMMENT_CHARS:
        raise BadInput(
            f"comment is {len(comment)} characters; the limit is {MAX_COMMENT_CHARS}", kind="shape"
        )
    if flag is not None:
        flag = flag.strip()
        if not flag or len(flag) > MAX_FLAG_CHARS:
            raise BadInput(f"a flag reason needs 1 to {MAX_FLAG_CHARS} characters", kind="shape")
    annotation = own_annotation(db, user, sentence) or _new_annotation(db, user, sentence)
    if annotation.state == ANN_SUBMITTED and (flag is not None or clear_flag):
        raise _conflict(
            db, user, sentence, "this annotation is submitted; it can no longer be flagged"
        )
    if flag is not None and sentence.state == SENT_DROPPED:
        raise _conflict(db, user, sentence, "this sentence was dropped from the corpus")
    if comment is not None:
        annotation.comment = comment
    if flag is not None:
        annotation.flag = flag
        annotation.state = ANN_FLAGGED
        if sentence.state in (SENT_QUEUED, SENT_IN_PROGRESS):
            sentence.state = SENT_HELD_BACK
        db.add(
            Event(
                user_id=user.id,
                kind="annotation.flagged",
                corpus_id=sentence.corpus_id,
                sentence_id=sentence.id,
                detail={"flag": flag},
            )
        )
    elif clear_flag and annotation.state == ANN_FLAGGED:
        annotation.flag = None
        annotation.state = ANN_DRAFT
        db.flush()
        if sentence.state == SENT_HELD_BACK and not still_held(db, sentence.id):
            sentence.state = open_state(db, sentence.id)
    annotation.updated_at = utcnow()
    db.commit()
    db.refresh(annotation)
    return annotation


# --------------------------------------------------------------------------- the queue
# A queue is the user's Assignment rows in the order (corpus_id, rank, sentence_id), which the
# index ix_assignments_queue holds; every call below walks that index for one page or one
# neighbour, so its cost does not grow with the length of the queue (counts are index counts).
@dataclass
class QueueItem:
    sentence_id: int
    corpus_id: int
    corpus_name: str
    document_name: str
    position: int
    text: str
    sentence_state: str
    annotation_state: str | None
    head: int
    flag: str | None


@dataclass
class QueuePage:
    """One page of a queue: its items, the queue's ``total`` and ``submitted`` counts, the
    1-based number of the first item, and cursors to the pages before and after (None at the
    ends)."""

    items: list[QueueItem] = field(default_factory=list)
    total: int = 0
    submitted: int = 0
    first_index: int = 1
    prev_cursor: str | None = None
    next_cursor: str | None = None


_QUEUE_KEY = (Assignment.corpus_id, Assignment.rank, Assignment.sentence_id)
_DONE = (ANN_SUBMITTED, ANN_FLAGGED)


def _key_of(row: Any) -> tuple[int, int, int]:
    return int(row.corpus_id), int(row.rank), int(row.sentence_id)


def queue_cursor(key: tuple[int, int, int]) -> str:
    return "-".join(str(k) for k in key)


def parse_queue_cursor(cursor: str) -> tuple[int, int, int]:
    """The key of a queue cursor (``CORPUS-RANK-SENTENCE``), or BadInput."""
    parts = cursor.split("-")
    if len(parts) != 3 or not all(p.isdigit() and len(p) < 19 for p in parts):
        raise BadInput(
            f"queue cursor {cursor[:40]!r} is not of the form CORPUS-RANK-SENTENCE "
            "(three whole numbers)",
            kind="shape",
        )
    return int(parts[0]), int(parts[1]), int(parts[2])


def _mine(user: User, corpus_id: int | None) -> list[Any]:
    where: list[Any] = [Assignment.user_id == user.id]
    if corpus_id is not None:
        where.append(Assignment.corpus_id == corpus_id)
    return where


def _dropped(db: Session, user: User, corpus_id: int | None, *extra: Any) -> int:
    """How many of the user's assignments (meeting ``extra``) are of dropped sentences:
    driven from the dropped sentences of each corpus (an index range per corpus)."""
    corpora = [corpus_id] if corpus_id is not None else select(Corpus.id)
    return (
        db.scalar(
            select(func.count())
            .select_from(Sentence)
            .join(
                Assignment,
                (Assignment.sentence_id == Sentence.id) & (Assignment.user_id == user.id),
            )
            .where(Sentence.corpus_id.in_(corpora), Sentence.state == SENT_DROPPED, *extra)
        )
        or 0
    )


def _maintained(db: Session, user: User, corpus_id: int | None) -> tuple[int, int, int]:
    """(assigned, submitted, dropped) of the user's queue (or its part in one corpus), read
    from the rows :mod:`app.counts` keeps: one row per corpus of the user."""
    where: list[Any] = [QueueCount.user_id == user.id]
    if corpus_id is not None:
        where.append(QueueCount.corpus_id == corpus_id)
    row = db.execute(
        select(
            func.coalesce(func.sum(QueueCount.assigned), 0),
            func.coalesce(func.sum(QueueCount.submitted), 0),
            func.coalesce(func.sum(QueueCount.dropped), 0),
        ).where(*where)
    ).one()
    return int(row[0]), int(row[1]), int(row[2])


def queue_counts(db: Session, user: User, corpus_id: int | None = None) -> tuple[int, int]:
    """(assigned, submitted) of the user's queue, or of its part in one corpus; dropped
    sentences are not in a queue. From the maintained counts: O(corpora of the user)."""
    assigned, submitted, dropped = _maintained(db, user, corpus_id)
    return assigned - dropped, submitted


def _earlier(db: Session, user: User, corpus_id: int | None, here: tuple[int, int, int]) -> int:
    """How many sentences of the user's queue (or of its part in one corpus) come before the
    queue key ``here``: the maintained counts of the rank blocks before ``here``'s block
    (``queue_blocks``, :mod:`app.counts`) plus an index range inside its block (at most 1,024
    ranks of ``ix_assignments_queue``), so O(blocks + one block) rather than O(place);
    dropped ones are subtracted only when the user has any (the maintained counts say)."""
    in_corpus, rank, _ = here
    block = rank >> QUEUE_BLOCK_BITS
    where: list[Any] = [
        QueueBlock.user_id == user.id,
        tuple_(QueueBlock.corpus_id, QueueBlock.block) < tuple_(in_corpus, block),
    ]
    if corpus_id is not None:
        where.append(QueueBlock.corpus_id == corpus_id)
    blocks = db.scalar(select(func.coalesce(func.sum(QueueBlock.n), 0)).where(*where)) or 0
    earlier = tuple_(*_QUEUE_KEY) < tuple_(*here)
    inside = (
        db.scalar(
            select(func.count())
            .select_from(Assignment)
            .where(
                Assignment.user_id == user.id,
                Assignment.corpus_id == in_corpus,
                Assignment.rank >= block << QUEUE_BLOCK_BITS,
                earlier,
            )
        )
        or 0
    )
    count = int(blocks) + int(inside)
    if _maintained(db, user, corpus_id)[2]:
        count -= _dropped(db, user, corpus_id, earlier)
    return count


def queue_page(
    db: Session,
    user: User,
    corpus_id: int | None = None,
    *,
    after: str | None = None,
    before: str | None = None,
    limit: int = 100,
) -> QueuePage:
    """One page of the user's queue in order: the first, or the one ``after`` / ``before`` a
    cursor."""
    limit = min(max(limit, 1), 1000)
    where = _mine(user, corpus_id)
    key = tuple_(*_QUEUE_KEY)
    stmt = (
        select(
            Assignment.corpus_id,
            Assignment.rank,
            Assignment.sentence_id,
            Corpus.name,
            Document.name,
            Sentence.position,
            Sentence.text,
            Sentence.state,
            Annotation.state,
            Annotation.head,
            Annotation.flag,
        )
        .join(Sentence, Sentence.id == Assignment.sentence_id)
        .join(Document, Document.id == Sentence.document_id)
        .join(Corpus, Corpus.id == Assignment.corpus_id)
        .outerjoin(
            Annotation,
            (Annotation.sentence_id == Assignment.sentence_id) & (Annotation.user_id == user.id),
        )
        .where(*where, Sentence.state != SENT_DROPPED)
    )
    if before is not None:
        rows = list(
            db.execute(
                stmt.where(key < tuple_(*parse_queue_cursor(before)))
                .order_by(*(c.desc() for c in _QUEUE_KEY))
                .limit(limit + 1)
            ).all()
        )
        has_prev, has_next = len(rows) > limit, True
        rows = rows[:limit][::-1]
    else:
        if after is not None:
            stmt = stmt.where(key > tuple_(*parse_queue_cursor(after)))
        rows = list(db.execute(stmt.order_by(*_QUEUE_KEY).limit(limit + 1)).all())
        has_prev, has_next = after is not None, len(rows) > limit
        rows = rows[:limit]
    total, submitted = queue_counts(db, user, corpus_id)
    first_index = 1
    if rows and has_prev:
        first_index += _earlier(db, user, corpus_id, _key_of(rows[0]))
    items = [
        QueueItem(
            sentence_id=r[2],
            corpus_id=r[0],
            corpus_name=r[3],
            document_name=r[4],
            position=r[5],
            text=r[6],
            sentence_state=r[7],
            annotation_state=r[8],
            head=r[9] or 0,
            flag=r[10],
        )
        for r in rows
    ]
    return QueuePage(
        items=items,
        total=total,
        submitted=submitted,
        first_index=first_index,
        prev_cursor=queue_cursor(_key_of(rows[0])) if rows and has_prev else None,
        next_cursor=queue_cursor(_key_of(rows[-1])) if rows and has_next else None,
    )


def _first_open(
    db: Session, user: User, corpus_id: int | None, *, after: Any = None, upto: Any = None
) -> int | None:
    """The first sentence in queue order (after key ``after``, before key ``upto``) whose own
    annotation is neither submitted nor flagged."""
    key = tuple_(*_QUEUE_KEY)
    stmt = (
        unfinished(
            select(Assignment.sentence_id).join(Sentence, Sentence.id == Assignment.sentence_id)
        )
        .where(*_mine(user, corpus_id), Sentence.state != SENT_DROPPED)
        .order_by(*_QUEUE_KEY)
        .limit(1)
    )
    if after is not None:
        stmt = stmt.where(key > tuple_(*after))
    if upto is not None:
        stmt = stmt.where(key < tuple_(*upto))
    return db.scalar(stmt)


def next_open(db: Session, user: User, corpus_id: int | None = None) -> int | None:
    """The first sentence of the queue not yet submitted or flagged."""
    return _first_open(db, user, corpus_id)


@dataclass
class QueuePlace:
    """A sentence's place in its user's queue: 1-based ``index`` of ``total``, how many are
    ``submitted``, the previous and next sentences, and the next one neither submitted nor
    flagged (wrapping round)."""

    index: int
    total: int
    submitted: int
    prev_id: int | None
    next_id: int | None
    next_open_id: int | None


def queue_place(db: Session, user: User, sentence_id: int) -> QueuePlace:
    """Where ``sentence_id`` sits in the user's queue (it must be assigned to them): a few
    index lookups, whatever the queue's length (the Bench asks on every page load)."""
    row = db.execute(
        select(*_QUEUE_KEY).where(
            Assignment.user_id == user.id, Assignment.sentence_id == sentence_id
        )
    ).first()
    if row is None:
        raise NotFound(f"sentence {sentence_id} is not in your queue")
    here = _key_of(row)
    key = tuple_(*_QUEUE_KEY)
    earlier, later = key < tuple_(*here), key > tuple_(*here)
    mine = _mine(user, None)
    before = _earlier(db, user, None, here)
    in_queue = (
        select(Assignment.sentence_id)
        .join(Sentence, Sentence.id == Assignment.sentence_id)
        .where(*mine, Sentence.state != SENT_DROPPED)
    )
    prev_id = db.scalar(in_queue.where(earlier).order_by(*(c.desc() for c in _QUEUE_KEY)).limit(1))
    next_id = db.scalar(in_queue.where(later).order_by(*_QUEUE_KEY).limit(1))
    open_id = _first_open(db, user, None, after=here)
    if open_id is None:  # wrap round to the start, stopping before this sentence
        open_id = _first_open(db, user, None, upto=here)
    total, submitted = queue_counts(db, user)
    if db.scalar(select(Sentence.state).where(Sentence.id == sentence_id)) == SENT_DROPPED:
        total += 1  # a dropped sentence opened by its link: counted while it is shown
    return QueuePlace(
        index=before + 1,
        total=total,
        submitted=submitted,
        prev_id=prev_id,
        next_id=next_id,
        next_open_id=open_id,
    )


def queue_corpora(db: Session, user: User) -> list[tuple[int, str]]:
    """(id, name) of every corpus with a sentence assigned to ``user``, by name: from the
    maintained queue counts (a row per corpus of the user), not the user's assignments."""
    rows = db.execute(
        select(Corpus.id, Corpus.name)
        .join(QueueCount, QueueCount.corpus_id == Corpus.id)
        .where(QueueCount.user_id == user.id, QueueCount.assigned > 0)
        .order_by(Corpus.name)
    ).all()
    return [(int(i), str(n)) for i, n in rows]


__all__ = [
    "MAX_TREE_CHARS",
    "QueueItem",
    "QueuePage",
    "SaveResult",
    "assigned_sentence",
    "current_revision",
    "own_annotation",
    "next_open",
    "parse_queue_cursor",
    "queue_corpora",
    "queue_counts",
    "queue_cursor",
    "queue_page",
    "queue_place",
    "revision_view",
    "save_revision",
    "set_note",
    "stored_words",
    "submit",
    "unknown_labels",
    "validate_pins",
    "validate_tree_text",
]
