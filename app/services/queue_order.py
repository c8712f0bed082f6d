"""The order in which a corpus offers its sentences: by document, or most informative first.

A corpus's setting ``queue_order`` is ``document`` (reading order) or ``informative``: the
sentences the active grammar is least sure of first, by their tree entropy per word (Hwa 2004,
"Sample selection for statistical parsing", Computational Linguistics 30(3)), which the
training job stores on each open sentence when a version becomes active
(app.services.training.rank_open_sentences). A queue is read in the order of its Assignment
rows' ``rank`` (app.services.annotation), so :func:`apply_order` writes the corpus's order
there: ranked sentences get their place in the entropy order (0, 1, 2...), and sentences not
ranked yet keep their reading rank, which is larger than any of those, so they follow in
reading order.

Only the order changes: every sentence stays in its document (export by document keeps whole
documents together as before), and a sentence's rank is the same on every one of its
Assignment rows, so all its annotators (given at once by app.services.assignment) meet it at
the same place in their queues.

:func:`unfinished` is the filter "this annotator's work on it is not finished" that the queue
(app.services.annotation) and the refresh look-ahead (app.services.refresh) share.
"""

from __future__ import annotations

from typing import Any, TypeVar, cast

from sqlalchemy import Select, Table, bindparam, func, or_, select, update
from sqlalchemy.orm import Session

from app.corpus_settings import QueueOrder
from app.models import (
    ANN_FLAGGED,
    ANN_SUBMITTED,
    Annotation,
    Assignment,
    Corpus,
    Document,
    Sentence,
    reading_rank,
)

#: Annotation states that take a sentence off its annotator's open work.
DONE_STATES = (ANN_SUBMITTED, ANN_FLAGGED)


def informative(corpus: Corpus) -> bool:
    return corpus.options.queue_order == QueueOrder.INFORMATIVE


def sentence_order(db: Session, corpus: Corpus) -> list[Any]:
    """ORDER BY terms over Sentence and Document for the corpus's queue order."""
    terms: list[Any] = []
    if informative(corpus):
        # highest entropy first; unranked (None) after every ranked sentence
        terms.append(-func.coalesce(Sentence.entropy_per_word, -1.0))
    return [*terms, Document.position, Document.id, Sentence.position]


def apply_order(db: Session, corpus_id: int) -> int:
    """Write the corpus's queue order into the ``rank`` of its Assignment rows; returns how
    many sentences changed place. Does not commit."""
    corpus = db.get(Corpus, corpus_id)
    if corpus is None:
        return 0
    rows = db.execute(
        select(
            Sentence.id,
            Sentence.document_id,
            Sentence.position,
            Sentence.entropy_per_word,
            func.min(Assignment.rank),
        )
        .join(Assignment, Assignment.sentence_id == Sentence.id)
        .join(Document, Document.id == Sentence.document_id)
        .where(Sentence.corpus_id == corpus_id)
        .group_by(
            Sentence.id,
            Sentence.document_id,
            Sentence.position,
            Sentence.entropy_per_word,
            Document.position,
            Document.id,
        )
        .order_by(*sentence_order(db, corpus))
    ).all()
    wanted: dict[int, int] = {}
    for place, (sid, doc, pos, entropy, _) in enumerate(rows):
        wanted[sid] = (
            place if informative(corpus) and entropy is not None else reading_rank(doc, pos)
        )
    changes = [
        {"sid": sid, "new_rank": wanted[sid]} for sid, _, _, _, now in rows if now != wanted[sid]
    ]
    if changes:
        table = cast(Table, Assignment.__table__)
        db.connection().execute(
            update(table)
            .where(table.c.sentence_id == bindparam("sid"))
            .values(rank=bindparam("new_rank")),
            changes,
        )
    return len(changes)


_Row = TypeVar("_Row")


def unfinished(stmt: Select[_Row]) -> Select[_Row]:
    """``stmt`` (a select over Assignment) narrowed to assignments whose own annotation is
    neither submitted nor flagged (none yet counts as unfinished)."""
    return stmt.outerjoin(
        Annotation,
        (Annotation.sentence_id == Assignment.sentence_id)
        & (Annotation.user_id == Assignment.user_id),
    ).where(or_(Annotation.state.is_(None), Annotation.state.not_in(DONE_STATES)))
