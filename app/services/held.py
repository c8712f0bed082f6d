"""Held-back sentences: where they wait and the ways out of that state.

An annotator holds a sentence back instead of handing it in, with a reason ("tokenization
wrong", "needs a linguist"...) and a note (:func:`app.services.annotation.set_note`); the
sentence's state becomes ``held_back`` and it leaves the assignment pool. Adjudicators and
admins then see it in :func:`held_back_list` (reason, note, who, since when) and take one way
out:

* :func:`release`: back to annotation. Every hold on it is lifted (the annotations go back to
  ``draft`` with their saved revisions; the reasons stay in the event log) and the sentence is
  ``in_progress`` again, or ``queued`` when nobody has saved a tree of it.
* fixing the tokens: on the Bench (``/bench/{id}?tokens`` opens its token fixer); only the
  sentence's annotators reach it there, so the list names them (:attr:`HeldRow.assignees`) and
  links those of them who look at it; then the sentence is released.
* :func:`drop`: out of the corpus. The sentence becomes ``dropped``: kept with every
  annotation, revision and event, but out of every queue, export, agreement figure and
  training set. :func:`restore` brings a dropped sentence back (held back again when a hold
  is still on it, otherwise open).

Every step is an event (``sentence.released``, ``sentence.dropped``, ``sentence.restored``)
and a compare-and-set on the sentence's state, so two adjudicators acting at once cannot both
win. Cost: the list is one joined query over the flagged annotations of the held sentences.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any, cast

from sqlalchemy import CursorResult, select, update
from sqlalchemy.orm import Session

from app.models import (
    ANN_DRAFT,
    ANN_FLAGGED,
    SENT_DROPPED,
    SENT_HELD_BACK,
    SENT_IN_PROGRESS,
    SENT_QUEUED,
    Annotation,
    Assignment,
    Corpus,
    Document,
    Event,
    Sentence,
    User,
    utcnow,
)
from app.schemas.common import UtcDateTime
from app.services.errors import Conflict, NotFound
from app.services.gold import check_note

#: Where a held-back sentence's tokens are fixed, as a format string of the sentence id.
TOKEN_FIX_PATH: str | None = "/bench/{}?tokens"
#: States a sentence can be dropped from (review and gold have their own way: reopen).
DROPPABLE = (SENT_HELD_BACK, SENT_QUEUED, SENT_IN_PROGRESS)


@dataclass(frozen=True)
class Hold:
    annotator: str
    reason: str
    note: str
    since: UtcDateTime


@dataclass(frozen=True)
class HeldRow:
    sentence_id: int
    corpus_id: int
    corpus: str
    document: str
    position: int
    text: str
    holds: list[Hold]
    assignees: list[str]  # usernames: the people who can fix its tokens on the Bench

    @property
    def reasons(self) -> list[str]:
        return sorted({h.reason for h in self.holds})


def token_fix_link(sentence_id: int) -> str | None:
    """The page where this sentence's tokens are fixed, or None while there is none."""
    return TOKEN_FIX_PATH.format(sentence_id) if TOKEN_FIX_PATH else None


def held_back_list(db: Session, corpus_id: int | None = None, *, limit: int = 500) -> list[HeldRow]:
    """Held-back sentences (longest held first) with every hold on each."""
    where = [Sentence.state == SENT_HELD_BACK]
    if corpus_id is not None:
        where.append(Sentence.corpus_id == corpus_id)
    rows = db.execute(
        select(Sentence, Corpus.name, Document.name, Annotation, User.username, User.display_name)
        .join(Corpus, Corpus.id == Sentence.corpus_id)
        .join(Document, Document.id == Sentence.document_id)
        .outerjoin(
            Annotation, (Annotation.sentence_id == Sentence.id) & (Annotation.state == ANN_FLAGGED)
        )
        .outerjoin(User, User.id == Annotation.user_id)
        .where(*where)
        .order_by(Sentence.id, Annotation.id)
    ).all()
    found: dict[int, tuple[Sentence, str, str, list[Hold]]] = {}
    for sentence, cname, dname, ann, uname, dispname in rows:
        entry = found.setdefault(sentence.id, (sentence, cname, dname, []))
        if ann is not None:
            entry[3].append(
                Hold(dispname or uname or "?", ann.flag or "", ann.comment or "", ann.updated_at)
            )
    who: dict[int, list[str]] = {}
    if found:
        for sid, username in db.execute(
            select(Assignment.sentence_id, User.username)
            .join(User, User.id == Assignment.user_id)
            .where(Assignment.sentence_id.in_(list(found)))
            .order_by(User.username)
        ):
            who.setdefault(sid, []).append(username)
    out = [
        HeldRow(s.id, s.corpus_id, cname, dname, s.position, s.text, holds, who.get(s.id, []))
        for s, cname, dname, holds in found.values()
    ]
    out.sort(key=lambda r: min((h.since for h in r.holds), default=datetime.max))
    return out[:limit]


@dataclass(frozen=True)
class DroppedRow:
    sentence_id: int
    document: str
    position: int
    text: str


def dropped_list(
    db: Session, corpus_id: int | None = None, *, limit: int = 200
) -> list[DroppedRow]:
    """Dropped sentences (of one corpus, or all), oldest first."""
    where = [Sentence.state == SENT_DROPPED]
    if corpus_id is not None:
        where.append(Sentence.corpus_id == corpus_id)
    rows = db.execute(
        select(Sentence, Document.name)
        .join(Document, Document.id == Sentence.document_id)
        .where(*where)
        .order_by(Sentence.id)
        .limit(limit)
    ).all()
    return [DroppedRow(s.id, dname, s.position, s.text) for s, dname in rows]


def open_state(db: Session, sentence_id: int) -> str:
    """``in_progress`` when someone saved a tree of the sentence, else ``queued``."""
    started = db.scalar(
        select(Annotation.id)
        .where(Annotation.sentence_id == sentence_id, Annotation.head > 0)
        .limit(1)
    )
    return SENT_IN_PROGRESS if started is not None else SENT_QUEUED


def still_held(db: Session, sentence_id: int) -> bool:
    return (
        db.scalar(
            select(Annotation.id)
            .where(Annotation.sentence_id == sentence_id, Annotation.state == ANN_FLAGGED)
            .limit(1)
        )
        is not None
    )


def _move(
    db: Session, sentence: Sentence, allowed: tuple[str, ...], new_state: str, what: str
) -> str:
    """Compare-and-set the sentence's state from one of ``allowed``; return the old one."""
    old = sentence.state
    if old not in allowed:
        raise Conflict(
            f"sentence {sentence.id} is {old.replace('_', ' ')}; only a "
            f"{' or '.join(s.replace('_', ' ') for s in allowed)} sentence can be "
            f"{what}",
            state=old,
        )
    moved = db.execute(
        update(Sentence)
        .where(Sentence.id == sentence.id, Sentence.state == old)
        .values(state=new_state)
        .execution_options(synchronize_session=False)
    )
    if cast(CursorResult[Any], moved).rowcount != 1:
        db.rollback()
        raise Conflict(f"sentence {sentence.id} changed meanwhile; reload it")
    return old


def _sentence(db: Session, sentence_id: int) -> Sentence:
    sentence = db.get(Sentence, sentence_id)
    if sentence is None:
        raise NotFound(f"no sentence with id {sentence_id}")
    return sentence


def release(db: Session, sentence_id: int, user: User, *, note: str | None = None) -> Sentence:
    """Lift every hold on a held-back sentence and send it back to annotation. Commits."""
    sentence = _sentence(db, sentence_id)
    note = check_note(note)
    _move(db, sentence, (SENT_HELD_BACK,), open_state(db, sentence.id), "released")
    lifted = []
    now = utcnow()
    for ann in db.scalars(
        select(Annotation).where(
            Annotation.sentence_id == sentence.id, Annotation.state == ANN_FLAGGED
        )
    ).all():
        lifted.append({"annotation_id": ann.id, "reason": ann.flag})
        ann.state = ANN_DRAFT
        ann.flag = None
        ann.updated_at = now
    db.add(
        Event(
            user_id=user.id,
            kind="sentence.released",
            corpus_id=sentence.corpus_id,
            sentence_id=sentence.id,
            detail={"holds": lifted, "note": note},
        )
    )
    db.commit()
    db.refresh(sentence)
    return sentence


def drop(db: Session, sentence_id: int, user: User, *, note: str | None = None) -> Sentence:
    """Take a sentence out of the corpus's work (kept, with its history). Commits."""
    sentence = _sentence(db, sentence_id)
    note = check_note(note)
    old = _move(db, sentence, DROPPABLE, SENT_DROPPED, "dropped")
    db.add(
        Event(
            user_id=user.id,
            kind="sentence.dropped",
            corpus_id=sentence.corpus_id,
            sentence_id=sentence.id,
            detail={"from": old, "note": note},
        )
    )
    db.commit()
    db.refresh(sentence)
    return sentence


def restore(db: Session, sentence_id: int, user: User, *, note: str | None = None) -> Sentence:
    """Bring a dropped sentence back: held back when a hold is still on it, else open."""
    sentence = _sentence(db, sentence_id)
    note = check_note(note)
    new_state = SENT_HELD_BACK if still_held(db, sentence.id) else open_state(db, sentence.id)
    _move(db, sentence, (SENT_DROPPED,), new_state, "restored")
    db.add(
        Event(
            user_id=user.id,
            kind="sentence.restored",
            corpus_id=sentence.corpus_id,
            sentence_id=sentence.id,
            detail={"to": new_state, "note": note},
        )
    )
    db.commit()
    db.refresh(sentence)
    return sentence
