"""Who may read a corpus: its sentences, who is assigned to them, its agreement log.

The rule
    Adjudicators and admins read every corpus (they assign, review and settle across
    corpora). An annotator reads a corpus they are a *member* of: one with a sentence assigned
    to them (their queue holds work from it). A corpus whose setting ``visible_to_everyone``
    is on is read by every account. To anyone else the corpus does not exist: its pages and
    API answer 404, the lists leave it out, so not even its name leaks.

Cost: one index walk over the caller's assignment rows (``ix_assignments_queue`` starts with
the user id) per request that lists or opens corpora; adjudicators and admins cost nothing.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import TypeVar

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.models import Assignment, Corpus, User
from app.services.corpora import find_corpus, is_staging
from app.services.errors import NotFound

T = TypeVar("T")


def member_corpus_ids(db: Session, user: User) -> set[int]:
    """The corpora with a sentence assigned to ``user``."""
    return set(
        db.scalars(select(Assignment.corpus_id).where(Assignment.user_id == user.id).distinct())
    )


def can_read(
    db: Session, corpus: Corpus, user: User | None, members: set[int] | None = None
) -> bool:
    """True when ``user`` (None: the command line) may read ``corpus``."""
    if is_staging(corpus):
        return False  # an import still being staged: nobody sees it before it is published
    if user is None or user.can_adjudicate or corpus.options.visible_to_everyone:
        return True
    if members is None:
        members = member_corpus_ids(db, user)
    return corpus.id in members


def readable(db: Session, user: User | None, corpora: Iterable[T]) -> list[T]:
    """The items of ``corpora`` (corpora, or rows with a ``corpus`` attribute) that ``user``
    may read, in their order."""
    out: list[T] = []
    members = member_corpus_ids(db, user) if user is not None and not user.can_adjudicate else set()
    for item in corpora:
        corpus = item if isinstance(item, Corpus) else getattr(item, "corpus")  # noqa: B009
        if can_read(db, corpus, user, members):
            out.append(item)
    return out


def readable_corpus(db: Session, corpus_id: int, user: User | None) -> Corpus:
    """The corpus when ``user`` may read it; NotFound (the same answer as for a corpus that
    does not exist) otherwise."""
    corpus = find_corpus(db, corpus_id)
    if corpus is None or not can_read(db, corpus, user):
        raise NotFound(f"no corpus with id {corpus_id}")
    return corpus
