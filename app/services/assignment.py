"""Assign sentences to people so each open sentence has N annotators, balanced across the team.

N is the corpus setting ``annotators_per_sentence`` (default 2). The team is every active
annotator and adjudicator (admins only when named explicitly). Sentences that are ``queued``
or ``in_progress`` are considered, in the corpus's queue order (app.services.queue_order);
gold sentences and sentences under review are left alone. For each sentence short of N, the
missing places go to the people with the fewest open assignments in the corpus (ties: fewer
assignments overall in this run, then user id), never to someone already assigned to it.
Running it again changes nothing for sentences that already have N: it is idempotent.

Cost: O(S * P log P) for S sentences and P people; one query for the existing assignments.
Memory: the existing assignments of the corpus and one batch of sentences and new rows (the
sentences are streamed in queue order and the rows written in batches of ASSIGN_BATCH), not
the whole corpus.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

from sqlalchemy import insert, select
from sqlalchemy.orm import Session

from app.models import (
    ROLE_ADJUDICATOR,
    ROLE_ANNOTATOR,
    SENT_IN_PROGRESS,
    SENT_QUEUED,
    Assignment,
    Document,
    Event,
    Sentence,
    User,
    reading_rank,
)
from app.services.corpora import get_corpus
from app.services.errors import BadInput, NotFound
from app.services.queue_order import apply_order, informative, sentence_order
from app.services.transactions import unit_of_work
from app.wording import plural

OPEN_STATES = (SENT_QUEUED, SENT_IN_PROGRESS)
ASSIGN_BATCH = 5_000  # sentences read, and assignment rows written, at a time


@dataclass
class AssignResult:
    created: int = 0
    sentences: int = 0  # sentences that received at least one new assignment
    already_complete: int = 0
    short: list[int] = field(default_factory=list)  # sentence ids still below N (team too small)
    per_user: dict[str, int] = field(default_factory=dict)  # username -> new assignments
    needed: int = 0

    def summary(self) -> str:
        text = (
            f"{plural(self.created, 'assignment')} made over "
            f"{plural(self.sentences, 'sentence')}; {self.already_complete} already had "
            f"{self.needed}"
        )
        if self.short:
            text += (
                f"; {plural(len(self.short), 'sentence')} could not reach {self.needed} "
                f"annotators (the team is too small)"
            )
        return text


def team(db: Session, usernames: Iterable[str] | None = None) -> list[User]:
    """The people to assign to: the named users, or every active annotator and adjudicator."""
    if usernames is None:
        return list(
            db.scalars(
                select(User)
                .where(User.active.is_(True), User.role.in_((ROLE_ANNOTATOR, ROLE_ADJUDICATOR)))
                .order_by(User.id)
            )
        )
    names = list(dict.fromkeys(usernames))
    users = list(db.scalars(select(User).where(User.username.in_(names)).order_by(User.id)))
    missing = set(names) - {u.username for u in users}
    if missing:
        raise NotFound(f"no user named {', '.join(sorted(missing))}")
    disabled = [u.username for u in users if not u.active]
    if disabled:
        raise BadInput(f"disabled user(s) cannot be assigned: {', '.join(disabled)}")
    return users


@unit_of_work
def assign_sentences(
    db: Session,
    corpus_id: int,
    *,
    per_sentence: int | None = None,
    usernames: Iterable[str] | None = None,
    sentence_ids: Iterable[int] | None = None,
    by: User | None = None,
) -> AssignResult:
    """Bring every open sentence (or the given ones) of the corpus up to N assignees.
    Commits (``assign_sentences.step`` does not)."""
    corpus = get_corpus(db, corpus_id)
    needed = int(
        per_sentence if per_sentence is not None else corpus.options.annotators_per_sentence
    )
    if needed < 1:
        raise BadInput(f"annotators per sentence must be at least 1, not {needed}")
    people = team(db, usernames)
    result = AssignResult(needed=needed)
    query = (
        select(Sentence.id, Sentence.document_id, Sentence.position)
        .join(Document, Document.id == Sentence.document_id)
        .where(Sentence.corpus_id == corpus.id, Sentence.state.in_(OPEN_STATES))
        .order_by(*sentence_order(db, corpus))
    )
    if sentence_ids is not None:
        wanted = set(sentence_ids)
        query = query.where(Sentence.id.in_(wanted))
    assigned: dict[int, set[int]] = {}
    load: dict[int, int] = {u.id: 0 for u in people}
    for sid, uid, state in db.execute(
        select(Assignment.sentence_id, Assignment.user_id, Sentence.state)
        .join(Sentence, Sentence.id == Assignment.sentence_id)
        .where(Sentence.corpus_id == corpus.id)
    ):
        assigned.setdefault(sid, set()).add(uid)
        if state in OPEN_STATES and uid in load:
            load[uid] += 1
    names = {u.id: u.username for u in people}
    fresh: dict[int, int] = dict.fromkeys(load, 0)
    found: set[int] = set()
    pending: list[dict[str, int]] = []

    def write() -> None:  # new rows in batches, as plain inserts: memory holds one batch
        if pending:
            db.execute(insert(Assignment), pending)
            pending.clear()

    # the sentences are read as a stream, in queue order, never all at once
    for sid, doc, pos in db.execute(query.execution_options(yield_per=ASSIGN_BATCH)):
        if sentence_ids is not None:
            found.add(sid)
        have = assigned.get(sid, set())
        missing = needed - len(have)
        if missing <= 0:
            result.already_complete += 1
            continue
        candidates = sorted(
            (uid for uid in load if uid not in have), key=lambda uid: (load[uid], fresh[uid], uid)
        )
        chosen = candidates[:missing]
        for uid in chosen:
            pending.append(
                {
                    "sentence_id": sid,
                    "user_id": uid,
                    "corpus_id": corpus.id,
                    "rank": reading_rank(doc, pos),
                }
            )
            load[uid] += 1
            fresh[uid] += 1
        if len(pending) >= ASSIGN_BATCH:
            write()
        if chosen:
            result.sentences += 1
            result.created += len(chosen)
        if len(have) + len(chosen) < needed:
            result.short.append(sid)
    if sentence_ids is not None:
        unknown = wanted - found
        if unknown:
            raise BadInput(
                f"sentence(s) {', '.join(map(str, sorted(unknown)))} are not open "
                f"sentences of corpus {corpus.name!r}"
            )
    write()
    if result.created and informative(corpus):
        db.flush()
        apply_order(db, corpus.id)  # new rows start in reading order
    result.per_user = {names[uid]: n for uid, n in fresh.items() if n}
    db.add(
        Event(
            user_id=by.id if by else None,
            kind="assign",
            corpus_id=corpus.id,
            detail={"created": result.created, "per_sentence": needed, "per_user": result.per_user},
        )
    )
    db.flush()
    return result


def assigned_to(db: Session, user: User, sentence_ids: Iterable[int]) -> set[int]:
    """Which of ``sentence_ids`` are assigned to ``user``."""
    ids = list(sentence_ids)
    if not ids:
        return set()
    return set(
        db.scalars(
            select(Assignment.sentence_id).where(
                Assignment.user_id == user.id, Assignment.sentence_id.in_(ids)
            )
        )
    )
