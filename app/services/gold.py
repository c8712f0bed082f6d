"""Gold trees: making, retiring and reopening them, and the current revision of an annotation.

What it does
    * :func:`current_revision`: an annotation's newest revision (the one its ``head`` names),
      the tree agreement scores, review shows and a 409 answer carries.
    * :func:`make_gold`: store a tree as the sentence's gold and mark the sentence gold; any
      gold it still has is retired first, so at most one gold row per sentence is current.
      The row keeps the annotators' notes for the adjudicator as they were at that moment.
    * :func:`reopen`: retire the current gold (``retired_at``/``retired_by_id``, never deleted)
      and send the sentence back to review.
    * :func:`gold_added`: what follows new gold, called once by each workflow that made some
      (the agreement log, a settle, a gold import): a retraining is queued when the corpus's
      setting says one is due (:func:`app.services.training.queue_if_due`).

The gold loop runs one way: a submit (``annotation``) logs agreement (``agreement``), which
makes gold here, which queues training (``training``), which refreshes suggestions
(``suggestions``). Nothing later in that chain imports anything earlier.

Nothing is ever deleted: every gold tree stays as a row; the newest unretired one is current.
Cost: each function reads or writes a handful of rows of one sentence.
"""

from __future__ import annotations

from typing import Any, cast

from sqlalchemy import CursorResult, select, update
from sqlalchemy.orm import Session

from app.models import (
    SENT_GOLD,
    SENT_IN_REVIEW,
    Annotation,
    Corpus,
    Event,
    Gold,
    Revision,
    Sentence,
    User,
    utcnow,
)
from app.services.errors import BadInput, Conflict, NotFound
from app.services.training import queue_if_due

MAX_NOTE_CHARS = 4_000


def current_revision(db: Session, annotation: Annotation | None) -> Revision | None:
    """The annotation's newest revision (number == head); None before its first save."""
    if annotation is None or annotation.head == 0:
        return None
    return db.scalar(
        select(Revision).where(
            Revision.annotation_id == annotation.id, Revision.number == annotation.head
        )
    )


def _retire(db: Session, sentence_id: int, by_id: int | None) -> list[int]:
    """Retire every current gold row of the sentence; their ids."""
    now = utcnow()
    retired = []
    for old in db.scalars(
        select(Gold).where(Gold.sentence_id == sentence_id, Gold.retired_at.is_(None))
    ).all():
        old.retired_at = now
        old.retired_by_id = by_id
        retired.append(old.id)
    return retired


def annotator_notes(db: Session, sentence_id: int) -> list[dict[str, Any]]:
    """The notes for the adjudicator on the sentence's annotations (empty notes left out), in
    annotation order: ``{"annotation_id", "annotator", "note", "flag"}``."""
    rows = db.execute(
        select(Annotation, User.username, User.display_name)
        .join(User, User.id == Annotation.user_id)
        .where(Annotation.sentence_id == sentence_id)
        .order_by(Annotation.id)
    ).all()
    return [
        {
            "annotation_id": a.id,
            "annotator": dname or uname,
            "note": a.comment.strip(),
            "flag": a.flag,
        }
        for a, uname, dname in rows
        if (a.comment or "").strip()
    ]


def make_gold(
    db: Session,
    sentence: Sentence,
    tree_text: str,
    *,
    provenance: str,
    adjudicator_id: int | None = None,
    source_annotation_id: int | None = None,
    note: str = "",
    own_annotation: bool = False,
) -> Gold:
    """Store ``tree_text`` as the sentence's gold and mark the sentence gold, keeping with it
    the annotators' notes of this moment (:func:`annotator_notes`) and whether the
    adjudicator had annotated the sentence (``own_annotation``).

    Any gold the sentence still has is retired first (kept, with ``retired_by_id``), so there
    is at most one current gold tree. A step of a larger workflow: flushes, does not commit.
    """
    _retire(db, sentence.id, adjudicator_id)
    gold = Gold(
        sentence_id=sentence.id,
        tree=tree_text,
        provenance=provenance,
        adjudicator_id=adjudicator_id,
        source_annotation_id=source_annotation_id,
        note=note,
        annotator_notes=annotator_notes(db, sentence.id),
        own_annotation=own_annotation,
        created_at=utcnow(),
    )
    db.add(gold)
    sentence.state = SENT_GOLD
    db.flush()
    return gold


def gold_added(db: Session, corpus: Corpus) -> None:
    """Call once after a workflow made new gold in ``corpus``: queue a retraining when the
    corpus's setting says one is due (it starts once the caller's transaction commits). A
    step: does not commit."""
    queue_if_due(db, corpus)


def check_note(note: str | None) -> str:
    """An adjudicator's note, stripped; BadInput when it is too long."""
    note = (note or "").strip()
    if len(note) > MAX_NOTE_CHARS:
        raise BadInput(
            f"the note is {len(note)} characters long; the limit is {MAX_NOTE_CHARS}", kind="note"
        )
    return note


def reopen(db: Session, sentence_id: int, user: User, *, note: str | None = None) -> Sentence:
    """Retire the sentence's gold (kept in its history) and send it back to review. Commits."""
    sentence = reopen_step(db, sentence_id, user, note=note)
    db.commit()
    db.refresh(sentence)
    return sentence


def reopen_step(
    db: Session,
    sentence_id: int,
    user: User,
    *,
    note: str | None = None,
    detail: dict[str, Any] | None = None,
) -> Sentence:
    """:func:`reopen` as a step of a larger workflow: flushes, does not commit (on a race it
    raises Conflict and the caller rolls back). ``detail`` adds to the event's detail."""
    sentence = db.get(Sentence, sentence_id)
    if sentence is None:
        raise NotFound(f"no sentence with id {sentence_id}")
    note = check_note(note)
    if sentence.state != SENT_GOLD:
        raise Conflict(
            f"sentence {sentence_id} is {sentence.state}, not gold; only a settled "
            "sentence can be reopened",
            state=sentence.state,
        )
    moved = db.execute(
        update(Sentence)
        .where(Sentence.id == sentence.id, Sentence.state == SENT_GOLD)
        .values(state=SENT_IN_REVIEW)
        .execution_options(synchronize_session=False)
    )
    if cast(CursorResult[Any], moved).rowcount != 1:
        db.rollback()
        raise Conflict(f"sentence {sentence_id} changed meanwhile; reload it")
    db.expire(sentence, ["state"])
    retired = _retire(db, sentence.id, user.id)
    db.add(
        Event(
            user_id=user.id,
            kind="gold.reopened",
            corpus_id=sentence.corpus_id,
            sentence_id=sentence.id,
            detail={"retired": retired, "note": note, **(detail or {})},
        )
    )
    db.flush()
    return sentence
