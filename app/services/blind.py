"""Blind annotation: nobody sees a colleague's tree of a sentence they are still annotating.

The rule
    A user is an *unfinished annotator* of a sentence while they are assigned to it or have
    started an annotation of it, and have not submitted their own annotation of it. While they
    are, no route shows them another annotator's tree of that sentence, whatever their role:
    an adjudicator (or admin) who also annotates sees the Review of that sentence, and the
    other annotators' trees of it in search results, only once their own tree is submitted.
    Their own work is always theirs to see; gold trees are not annotators' trees.

    The Agreement page reads the rule's result from ``hidden_sentences``, whose database
    triggers (:mod:`app.counts`) state the same rule in SQL: a change to the rule changes both.

Cost: one indexed query (assignments and annotations by user), for one sentence or for all of
a user's sentences (a set of ids, as big as the user's queue).
"""

from __future__ import annotations

from collections.abc import Iterable

from sqlalchemy import Select, select, union
from sqlalchemy.orm import Session

from app.models import ANN_SUBMITTED, Annotation, Assignment, User
from app.services.errors import Forbidden


def _unfinished(user_id: int, sentence_ids: Iterable[int] | None) -> Select[tuple[int]]:
    started = union(
        select(Assignment.sentence_id).where(Assignment.user_id == user_id),
        select(Annotation.sentence_id).where(Annotation.user_id == user_id),
    ).subquery()
    submitted = select(Annotation.sentence_id).where(
        Annotation.user_id == user_id, Annotation.state == ANN_SUBMITTED
    )
    query = select(started.c.sentence_id).where(started.c.sentence_id.not_in(submitted))
    if sentence_ids is not None:
        query = query.where(started.c.sentence_id.in_(list(sentence_ids)))
    return query


def unfinished_query(user_id: int) -> Select[tuple[int]]:
    """The ids of every sentence ``user_id`` still annotates, as a query to nest in another
    (``sentence_id.in_(...)``)."""
    return _unfinished(user_id, None)


def unfinished_sentences(
    db: Session, user: User, sentence_ids: Iterable[int] | None = None
) -> set[int]:
    """The ids of the sentences (of ``sentence_ids``, default all) ``user`` still annotates."""
    return set(db.scalars(_unfinished(user.id, sentence_ids)))


def still_annotating(db: Session, sentence_id: int, user: User) -> bool:
    return bool(unfinished_sentences(db, user, [sentence_id]))


def ensure_not_blind(db: Session, sentence_id: int, user: User) -> None:
    """Forbidden (403) while ``user`` is an unfinished annotator of the sentence."""
    if still_annotating(db, sentence_id, user):
        raise Forbidden(
            f"you are still annotating sentence {sentence_id}: submit your own "
            "tree on the Bench before you see or settle the others' trees",
            kind="blind",
        )
