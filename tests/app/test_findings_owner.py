"""A findings run has an owner, like a training job: a retry (the worker queue delivers a job
again when it thinks its worker stopped) takes a ``running`` run over only when its owner is
gone, so a live-but-slow process never has its run found twice, and a process whose run was
taken over writes nothing."""

from __future__ import annotations

import os
import time
from datetime import timedelta

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.models import RUN_DONE, RUN_FAILED, RUN_RUNNING, FindingRow, FindingRun, utcnow
from app.services import findings as svc
from app.services import owners
from tests.app.quality_helpers import import_gold


def _claimed(app, db: Session) -> int:  # type: ignore[no-untyped-def]
    corpus, _ = import_gold(db)
    run = svc.queue_run(db, corpus.id, reason="test")
    db.commit()
    run_id = svc.claim_run(app.state.sessionmaker, run.id)
    assert run_id == run.id
    return run_id


def _owner(db: Session, run_id: int, host: str, pid: int, beat_age: float) -> None:
    run = db.get(FindingRun, run_id)
    assert run is not None
    run.owner_host, run.owner_pid = host, pid
    run.heartbeat_at = utcnow() - timedelta(seconds=beat_age)
    db.commit()


def _findings(db: Session, run_id: int) -> int:
    return db.scalar(select(func.count(FindingRow.id)).where(FindingRow.run_id == run_id)) or 0


def test_findings_claim_records_this_process_as_owner(app, db, people) -> None:
    run_id = _claimed(app, db)
    run = db.get(FindingRun, run_id)
    assert run is not None and run.status == RUN_RUNNING
    assert owners.owned_by_me(run) and run.heartbeat_at is not None


def test_findings_retry_leaves_a_run_a_live_process_runs(app, db, people) -> None:
    run_id = _claimed(app, db)
    assert svc.take_run(app.state.sessionmaker, run_id) is False  # we run it, alive
    _owner(db, run_id, "another-host", 4242, beat_age=1.0)  # elsewhere, beating
    assert svc.take_run(app.state.sessionmaker, run_id) is False
    db.expire_all()
    run = db.get(FindingRun, run_id)
    assert run is not None and (run.owner_host, run.owner_pid) == ("another-host", 4242)
    assert run.status == RUN_RUNNING and _findings(db, run_id) == 0


def test_findings_retry_takes_over_a_run_whose_owner_is_gone_once(app, db, people) -> None:
    run_id = _claimed(app, db)
    _owner(db, run_id, "another-host", 4242, beat_age=owners.STALE_AFTER + 30)
    assert svc.take_run(app.state.sessionmaker, run_id) is True
    # a second delivery finds the new owner alive and does nothing
    assert svc.take_run(app.state.sessionmaker, run_id) is False
    db.expire_all()
    assert owners.owned_by_me(db.get(FindingRun, run_id))
    svc.run_finder(app.state.sessionmaker, run_id)
    db.expire_all()
    run = db.get(FindingRun, run_id)
    assert run is not None and run.status == RUN_DONE
    assert _findings(db, run_id) > 0


def test_findings_run_taken_over_meanwhile_writes_nothing(app, db, people) -> None:
    run_id = _claimed(app, db)
    # another process took it over while this one was silent: this one must not write
    _owner(db, run_id, "another-host", 4242, beat_age=0.0)
    svc.run_finder(app.state.sessionmaker, run_id)
    db.expire_all()
    run = db.get(FindingRun, run_id)
    assert run is not None and run.status == RUN_RUNNING and run.owner_host == "another-host"
    assert _findings(db, run_id) == 0


def test_findings_restart_fails_only_runs_whose_owner_is_gone(app, db, people) -> None:
    live = _claimed(app, db)
    gone = svc.queue_run(db, db.get(FindingRun, live).corpus_id, reason="second")
    db.commit()
    assert svc.claim_run(app.state.sessionmaker, gone.id) == gone.id
    _owner(db, live, "another-host", 4242, beat_age=1.0)
    _owner(db, gone.id, "another-host", 4343, beat_age=owners.STALE_AFTER + 30)
    assert svc.fail_interrupted_runs(app.state.sessionmaker) == 1
    db.expire_all()
    assert db.get(FindingRun, live).status == RUN_RUNNING
    assert db.get(FindingRun, gone.id).status == RUN_FAILED


def test_findings_heartbeat_moves_while_the_run_runs(app, db, people) -> None:
    run_id = _claimed(app, db)
    _owner(db, run_id, owners.HOST, os.getpid(), beat_age=600)
    old = db.get(FindingRun, run_id).heartbeat_at
    with owners.Heartbeat(app.state.sessionmaker, FindingRun, run_id, RUN_RUNNING, every=0.05):
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:
            db.expire_all()
            if db.get(FindingRun, run_id).heartbeat_at != old:
                break
            time.sleep(0.05)
    db.expire_all()
    assert db.get(FindingRun, run_id).heartbeat_at > old
