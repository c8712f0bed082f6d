"""What an adjudicator does with findings: ask for a run, keep one "fine as is", or reopen
the sentences it names.

* :func:`request_run` queues a run of the finder (``app.services.findings.queue_run``),
  commits, and kicks the background worker that drains it (the training runner's).
* :func:`mark_fine` records a ``fine_as_is`` verdict under the finding's key: the finding is
  kept (its row and the verdict stay) but no longer listed among the open ones, in this run
  or any later run that finds the same key again.
* :func:`reopen_finding` sends every gold sentence the finding names back to review (their
  gold is retired, never deleted: ``app.services.gold.reopen_step``) and records a
  ``reopened`` verdict. All in one transaction: every named sentence is reopened, or none is.
  Occurrences in submitted annotations (not gold yet) need no reopening and are skipped, as
  are sentences already back in review.

Cost: one row per verdict; reopening touches the named sentences' gold rows.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy.orm import Session

from app.models import (
    SENT_GOLD,
    VERDICT_FINE,
    VERDICT_REOPENED,
    Corpus,
    Event,
    FindingRun,
    FindingVerdict,
    Sentence,
    User,
    utcnow,
)
from app.services.errors import NotFound
from app.services.findings import get_finding, queue_run
from app.services.gold import check_note, reopen_step
from app.services.training import get_runner
from app.services.transactions import unit_of_work


def request_run(
    target: Any, corpus_id: int, *, user: User | None, with_annotations: bool = False
) -> FindingRun:
    """Queue a run (or join the queued one) and start the worker. ``target`` is ``app.state``
    or a sessionmaker (see ``app.services.training.get_runner``). Commits."""
    runner = get_runner(target)
    with runner.factory() as db:
        if db.get(Corpus, corpus_id) is None:
            raise NotFound(f"no corpus with id {corpus_id}")
        who = f"on request by {user.username}" if user is not None else "on request"
        run = queue_run(
            db,
            corpus_id,
            reason=who,
            user_id=user.id if user else None,
            with_annotations=with_annotations,
        )
        db.commit()
        db.refresh(run)
        db.expunge(run)
    runner.kick()
    return run


def _verdict(
    db: Session, corpus_id: int, finding_id: int, verdict: str, user: User, note: str
) -> FindingVerdict:
    row = get_finding(db, finding_id, corpus_id)
    v = FindingVerdict(
        corpus_id=row.corpus_id,
        kind=row.kind,
        key=row.key,
        key_hash=row.key_hash,
        verdict=verdict,
        user_id=user.id,
        note=note,
        created_at=utcnow(),
    )
    db.add(v)
    db.add(
        Event(
            user_id=user.id,
            kind=f"finding.{verdict}",
            corpus_id=row.corpus_id,
            detail={"finding": row.id, "key": row.key, "note": note},
        )
    )
    db.flush()
    return v


@unit_of_work
def mark_fine(
    db: Session, corpus_id: int, finding_id: int, user: User, *, note: str | None = None
) -> FindingVerdict:
    """Keep the finding as it is and stop listing it as open. Commits."""
    return _verdict(db, corpus_id, finding_id, VERDICT_FINE, user, check_note(note))


@dataclass
class Reopened:
    verdict: FindingVerdict
    sentence_ids: list[int]
    skipped: list[int]


@unit_of_work
def reopen_finding(
    db: Session, corpus_id: int, finding_id: int, user: User, *, note: str | None = None
) -> Reopened:
    """Send the finding's gold sentences back to review and record the verdict. Commits
    (everything or, on any error, nothing)."""
    note = check_note(note)
    row = get_finding(db, finding_id, corpus_id)
    named = sorted({int(o["sentence"]) for o in row.occurrences if o.get("source") == "gold"})
    reopened, skipped = [], []
    for sid in named:
        sentence = db.get(Sentence, sid)
        if sentence is None or sentence.state != SENT_GOLD:
            skipped.append(sid)
            continue
        reopen_step(
            db,
            sid,
            user,
            note=note or f"reopened from finding {row.id}",
            detail={"finding": row.id},
        )
        reopened.append(sid)
    v = _verdict(db, corpus_id, finding_id, VERDICT_REOPENED, user, note)
    return Reopened(v, reopened, skipped)
