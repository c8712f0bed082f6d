"""Who may read a corpus: its sentences, who is assigned to them, its agreement log.

The rule
    Adjudicators and admins read every corpus (they assign, review and settle across
    corpora). An annotator reads a corpus they are a *member* of, which is either of

    * an **explicit member**: an admin added them to the corpus's member list (the corpus
      page, ``POST /api/corpora/{id}/members``, ``treewright members``), or
    * a **member by assignment**: a sentence of the corpus is assigned to them (their queue
      holds work from it).

    So removing someone from the list takes away the explicit membership only: while work of
    the corpus is assigned to them they still read it (they must, to do that work). A corpus
    whose setting ``visible_to_everyone`` is on is read by every account. To anyone else the
    corpus does not exist: its pages and API answer 404, the lists leave it out, so not even
    its name leaks. Adjudicators may be listed too (the list says who works on the corpus,
    and keeps them a reader should their role be lowered to annotator).

Cost: two index walks of one row per corpus (the caller's queue counts, whose key starts with
the user id; the caller's member rows: ``ix_corpus_members_user_id``) per request that lists
or opens corpora; adjudicators and admins cost nothing.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime
from typing import TypeVar

from sqlalchemy import func, select, union
from sqlalchemy.orm import Session

from app.models import Assignment, Corpus, CorpusMember, Event, QueueCount, User
from app.services.corpora import find_corpus, is_staging
from app.services.errors import BadInput, NotFound
from app.services.transactions import unit_of_work

T = TypeVar("T")


def member_corpus_ids(db: Session, user: User) -> set[int]:
    """The corpora ``user`` is an explicit member of or has a sentence assigned in (the
    latter from the user's queue counts, kept by database triggers, app.counts: one row per
    corpus, not one per assigned sentence)."""
    return set(
        db.scalars(
            union(
                select(QueueCount.corpus_id).where(
                    QueueCount.user_id == user.id, QueueCount.assigned > 0
                ),
                select(CorpusMember.corpus_id).where(CorpusMember.user_id == user.id),
            )
        )
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


# ---------------------------------------------------------------------------------------------
# the member list


@dataclass(frozen=True)
class Member:
    """One row of a corpus's member list: an explicit member, someone with work assigned in
    the corpus, or both."""

    user_id: int
    username: str
    display_name: str
    role: str
    explicit: bool
    added_at: datetime | None
    assigned: int  # sentences of the corpus assigned to them


def members(db: Session, corpus: Corpus) -> list[Member]:
    """The corpus's members, explicit and by assignment, by user name. O(members) rows: the
    assignment counts are one grouped index walk over the corpus's assignments."""
    assigned = dict(
        db.execute(
            select(Assignment.user_id, func.count())
            .where(Assignment.corpus_id == corpus.id)
            .group_by(Assignment.user_id)
        ).all()
    )
    added = dict(
        db.execute(
            select(CorpusMember.user_id, CorpusMember.added_at).where(
                CorpusMember.corpus_id == corpus.id
            )
        ).all()
    )
    ids = set(assigned) | set(added)
    if not ids:
        return []
    users = db.scalars(select(User).where(User.id.in_(ids)).order_by(User.username))
    return [
        Member(
            user_id=u.id,
            username=u.username,
            display_name=u.display_name,
            role=str(u.role),
            explicit=u.id in added,
            added_at=added.get(u.id),
            assigned=int(assigned.get(u.id, 0)),
        )
        for u in users
    ]


def _user_named(db: Session, username: str) -> User:
    name = (username or "").strip()
    if not name:
        raise BadInput("name the user to add or remove (their user name)")
    user = db.scalar(select(User).where(User.username == name))
    if user is None:
        raise NotFound(f"no user named {name!r}")
    return user


@unit_of_work
def add_member(db: Session, corpus: Corpus, username: str, *, by: User | None = None) -> bool:
    """Add ``username`` to the corpus's member list; False when they were on it already.
    A disabled account cannot be added. Commits."""
    user = _user_named(db, username)
    if not user.active:
        raise BadInput(f"the user {user.username!r} is disabled: enable the account first")
    if db.get(CorpusMember, (corpus.id, user.id)) is not None:
        return False
    db.add(CorpusMember(corpus_id=corpus.id, user_id=user.id, added_by_id=by.id if by else None))
    _logged(db, "corpus_member_added", corpus, user, by)
    return True


def _logged(db: Session, kind: str, corpus: Corpus, user: User, by: User | None) -> None:
    db.add(
        Event(
            user_id=by.id if by else None,
            kind=kind,
            corpus_id=corpus.id,
            detail={"username": user.username},
        )
    )
    db.flush()


@unit_of_work
def remove_member(db: Session, corpus: Corpus, username: str, *, by: User | None = None) -> int:
    """Take ``username`` off the corpus's member list. Answers how many of the corpus's
    sentences are still assigned to them (while any are, they still read the corpus).
    NotFound when they were not on the list. Commits."""
    user = _user_named(db, username)
    row = db.get(CorpusMember, (corpus.id, user.id))
    if row is None:
        raise NotFound(f"{user.username} is not on the member list of {corpus.name}")
    db.delete(row)
    _logged(db, "corpus_member_removed", corpus, user, by)
    return int(
        db.scalar(
            select(func.count())
            .select_from(Assignment)
            .where(Assignment.corpus_id == corpus.id, Assignment.user_id == user.id)
        )
        or 0
    )
