"""Background training recovery fails only the jobs whose owner is gone.

A worker of ``serve --workers N`` that (re)starts runs ``fail_interrupted``; it must leave a job
that another live worker trains alone and fail one whose process died. The first test runs two
real processes against the suite's database (PostgreSQL on CI's PostgreSQL pass, which sets
TREEWRIGHT_TEST_DATABASE_URL; SQLite otherwise): one claims a job and beats, the other starts a
runner as a restarted worker does.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from datetime import timedelta

import pytest
from sqlalchemy.orm import Session

from app.models import GV_FAILED, GV_QUEUED, GV_READY, GV_TRAINING, GrammarVersion, utcnow
from app.services import training
from app.services.corpora import create_corpus
from app.settings import PROJECT_ROOT, Settings

SETUP = """
import sys
from app.db import make_engine, make_sessionmaker
from app.services import training
from app.settings import Settings
factory = make_sessionmaker(make_engine(Settings(database_url=sys.argv[1],
                                                 data_dir=sys.argv[2])))
"""
# worker A: claims the queued job and keeps it alive (heartbeat) until its stdin closes
OWNER = (
    SETUP
    + """
vid = training.claim(factory)
print(vid, flush=True)
with training.Heartbeat(factory, vid, every=0.2):
    sys.stdin.read()
"""
)
# worker B: starts as a restarted worker does (its runner fails interrupted jobs first)
RESTARTED = (
    SETUP
    + """
runner = training.get_runner(factory, in_process=True)
runner.shutdown()
"""
)


def _python(code: str, settings: Settings, **kw: object) -> subprocess.Popen[str]:
    args = [
        sys.executable,
        "-c",
        textwrap.dedent(code),
        settings.resolved_database_url,
        str(settings.data_dir),
    ]
    return subprocess.Popen(args, cwd=PROJECT_ROOT, text=True, **kw)  # type: ignore[call-overload]


def _restart_a_worker(settings: Settings) -> None:
    proc = _python(RESTARTED, settings, stderr=subprocess.PIPE)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 0, err


def _row(db: Session, version_id: int) -> GrammarVersion:
    db.expire_all()
    row = db.get(GrammarVersion, version_id)
    assert row is not None
    return row


def _queued_job(db: Session, name: str = "Tide tables") -> int:
    corpus = create_corpus(db, name)
    return training.request_training(db, corpus.id, reason="test").id


def test_training_owner_restarted_worker_spares_a_live_job_and_fails_a_dead_one(
    settings: Settings, db: Session
) -> None:
    version_id = _queued_job(db)
    owner = _python(OWNER, settings, stdin=subprocess.PIPE, stdout=subprocess.PIPE)
    try:
        assert owner.stdout is not None
        claimed = owner.stdout.readline().strip()
        assert claimed == str(version_id)
        row = _row(db, version_id)
        assert (row.status, row.owner_pid, row.owner_host) == (
            GV_TRAINING,
            owner.pid,
            training.HOST,
        )
        first_beat = row.heartbeat_at
        deadline = time.monotonic() + 60
        while _row(db, version_id).heartbeat_at == first_beat:  # the owner beats
            assert time.monotonic() < deadline, "no heartbeat within 60 s"
            time.sleep(0.05)

        _restart_a_worker(settings)
        assert _row(db, version_id).status == GV_TRAINING  # another live worker's job

        os.kill(owner.pid, signal.SIGKILL)
        owner.wait(timeout=60)
        _restart_a_worker(settings)
        row = _row(db, version_id)
        assert row.status == GV_FAILED
        assert "interrupted" in row.message
    finally:
        if owner.poll() is None:
            owner.kill()
            owner.wait(timeout=60)


def _training_row(
    db: Session, *, host: str, pid: int | None, beat_age: float | None, name: str = "Tide tables"
) -> int:
    version_id = _queued_job(db, name)
    row = _row(db, version_id)
    row.status = GV_TRAINING
    row.owner_host = host
    row.owner_pid = pid
    row.heartbeat_at = None if beat_age is None else utcnow() - timedelta(seconds=beat_age)
    db.commit()
    return version_id


# "self" stands for this test process's pid, filled in at run time: a pid in the parameters
# would give each pytest-xdist worker a different test id, and xdist refuses that
@pytest.mark.parametrize(
    ("host", "pid", "beat_age", "gone"),
    [
        ("another-host", 4242, 1.0, False),  # elsewhere and beating: alive
        ("another-host", 4242, training.STALE_AFTER + 30, True),  # elsewhere, silent: gone
        ("this-host", "self", 1.0, False),  # this process: alive
        ("this-host", None, None, True),  # claimed before owners were recorded
    ],
)
def test_training_owner_decides_by_heartbeat_and_process(
    app,
    db: Session,  # type: ignore[no-untyped-def]
    host: str,
    pid: int | str | None,
    beat_age: float | None,
    gone: bool,
) -> None:
    host = training.HOST if host == "this-host" else host
    pid = os.getpid() if pid == "self" else pid
    version_id = _training_row(db, host=host, pid=pid, beat_age=beat_age)
    failed = training.fail_interrupted(app.state.sessionmaker)
    assert failed == int(gone)
    assert _row(db, version_id).status == (GV_FAILED if gone else GV_TRAINING)


def test_training_owner_dead_process_on_this_host_is_gone_at_once(app, db: Session) -> None:  # type: ignore[no-untyped-def]
    ended = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        capture_output=True,
        text=True,
        check=True,
    )
    dead_pid = int(ended.stdout)  # that process has exited
    version_id = _training_row(db, host=training.HOST, pid=dead_pid, beat_age=0.5)
    assert training.fail_interrupted(app.state.sessionmaker) == 1
    assert _row(db, version_id).status == GV_FAILED


def test_training_owner_take_runs_a_job_once_and_takes_over_only_from_a_gone_owner(
    app,
    db: Session,  # type: ignore[no-untyped-def]
) -> None:
    factory = app.state.sessionmaker
    version_id = _queued_job(db)
    assert training.take(factory, version_id)  # queued -> training, owned here
    row = _row(db, version_id)
    assert (row.status, row.owner_pid) == (GV_TRAINING, os.getpid())
    assert not training.take(factory, version_id)  # a live owner (this process) trains it

    ended = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        capture_output=True,
        text=True,
        check=True,
    )
    row.owner_pid = int(ended.stdout)  # as if a worker that has exited had claimed it
    db.commit()
    assert training.take(factory, version_id)  # taken over: same row, same number
    row = _row(db, version_id)
    assert (row.status, row.owner_pid, row.number) == (GV_TRAINING, os.getpid(), 1)
    assert "started again" in row.message

    row.status = GV_READY
    db.commit()
    assert not training.take(factory, version_id)  # finished: nothing to do


def test_training_owner_requeue_puts_a_gone_owners_job_back_in_the_queue(
    app,
    db: Session,  # type: ignore[no-untyped-def]
) -> None:
    gone = _training_row(db, host="another-host", pid=4242, beat_age=training.STALE_AFTER + 30)
    alive = _training_row(db, host="another-host", pid=4343, beat_age=1.0, name="Harbour log")
    assert training.fail_interrupted(app.state.sessionmaker, requeue=True) == 1
    row = _row(db, gone)
    assert (row.status, row.owner_pid, row.owner_host, row.number) == (GV_QUEUED, None, None, 1)
    assert _row(db, alive).status == GV_TRAINING
