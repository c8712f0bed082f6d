"""Background jobs on the PostgreSQL queue (app.jobs): two ``treewright worker`` processes
share the jobs, and a job whose worker is killed mid-job (``kill -9``) is run again by the
other worker, once in effect.

Runs on the PostgreSQL pass of the suite (TREEWRIGHT_TEST_DATABASE_URL, as .ci/run sets it);
on SQLite there is no queue: each server runs its jobs itself. Gold is the demo's 75
hand-bracketed trees (app/demo, invented), one corpus per job.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from typing import Any

import pytest
from sqlalchemy import create_engine, func, select, text
from sqlalchemy.orm import Session

from app.main import create_app
from app.models import GV_READY, GV_TRAINING, Event, GrammarVersion
from app.services import findings, training
from app.services.corpora import create_corpus
from app.settings import PROJECT_ROOT, Settings
from tests.app.conftest import on_postgres
from tests.app.review_helpers import import_demo_gold, wait_for_version
from tests.app.worker_helpers import start_worker

needs_postgres = pytest.mark.skipif(
    not on_postgres(),
    reason="the worker queue needs PostgreSQL; this run uses SQLite "
    "(set TREEWRIGHT_TEST_DATABASE_URL to a postgresql+psycopg:// URL)",
)

#: Seconds of silence after which a worker counts as dead (short, so the test is quick).
STALLED = 3.0
JOBS = 3
WAIT = 600.0  # generous: the machine may be loaded; every wait ends on its condition


def _clear_queue(url: str) -> None:
    """The queue's tables outlive the suite's per-test emptying; start from an empty queue."""
    engine = create_engine(url, isolation_level="AUTOCOMMIT")
    with engine.connect() as conn:
        if conn.scalar(text("SELECT to_regclass('procrastinate_jobs')")) is not None:
            conn.execute(
                text(
                    "TRUNCATE procrastinate_jobs, procrastinate_events, procrastinate_workers, "
                    "procrastinate_periodic_defers RESTART IDENTITY CASCADE"
                )
            )
    engine.dispose()


def _start_worker(settings: Settings, name: str) -> subprocess.Popen[str]:
    return start_worker(
        settings.resolved_database_url,
        str(settings.data_dir),
        STALLED,
        name,
        text=True,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )


def _stop(proc: subprocess.Popen[str]) -> str:
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(timeout=120)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=60)
    return proc.stderr.read() if proc.stderr else ""


def _rows(db: Session) -> list[GrammarVersion]:
    db.expire_all()
    return list(db.scalars(select(GrammarVersion).order_by(GrammarVersion.id)))


def _wait(what: str, check: Any, workers: list[subprocess.Popen[str]]) -> Any:
    deadline = time.monotonic() + WAIT
    while True:
        found = check()
        if found:
            return found
        for proc in workers:
            assert proc.poll() is None or proc.returncode == -signal.SIGKILL, (
                f"a worker ended ({proc.returncode}): {proc.stderr.read() if proc.stderr else ''}"
            )
        assert time.monotonic() < deadline, f"not within {WAIT} s: {what}"
        time.sleep(0.05)


@pytest.fixture
def queue_app(settings: Settings) -> Iterator[Any]:
    """A server set to hand its jobs to workers (job_runner = "workers")."""
    _clear_queue(settings.resolved_database_url)
    application = create_app(settings.model_copy(update={"job_runner": "workers"}))
    yield application
    runner = training._RUNNERS.get(application.state.engine)
    if runner is not None:
        runner.shutdown()
    application.state.engine.dispose()


@needs_postgres
@pytest.mark.slow
def test_jobs_spread_over_two_workers_and_survive_one_killed_mid_job(
    settings: Settings, queue_app: Any
) -> None:
    factory = queue_app.state.sessionmaker
    db: Session = factory()
    corpora = [
        import_demo_gold(db, f"Ferry log {i}", settings={"retrain_every": 0, "heldout_every": 8})
        for i in range(JOBS)
    ]
    # the server's runner puts jobs on the queue (and applies the queue's schema)
    runner = training.get_runner(queue_app.state)
    assert type(runner).__name__ == "QueueRunner"
    workers = [_start_worker(settings, "first"), _start_worker(settings, "second")]
    try:

        def registered() -> bool:
            count = db.scalar(text("SELECT count(*) FROM procrastinate_workers"))
            db.rollback()
            return count == len(workers)

        _wait("both workers listening to the queue", registered, workers)
        versions = [
            training.schedule_training(queue_app.state, c.id, "queue test").id for c in corpora
        ]
        pids = {w.pid for w in workers}

        # spread: both workers train a job at the same time
        def both_training() -> dict[int, int] | None:
            owners = {v.owner_pid: v.id for v in _rows(db) if v.status == GV_TRAINING}
            return owners if pids <= set(owners) else None

        owners = _wait("both workers training at once", both_training, workers)
        victim, survivor = workers[0], workers[1]
        victim_job = owners[victim.pid]

        os.kill(victim.pid, signal.SIGKILL)
        victim.wait(timeout=60)
        # killed mid-job: the row still names the dead process as its owner
        row = next(v for v in _rows(db) if v.id == victim_job)
        assert (row.status, row.owner_pid) == (GV_TRAINING, victim.pid)

        done = [wait_for_version(db, vid, timeout=WAIT) for vid in versions]
        assert [v.status for v in done] == [GV_READY] * JOBS, [v.message for v in done]

        # never lost: the victim's job was run again, to its end, by the other worker
        redone = next(v for v in done if v.id == victim_job)
        assert redone.options["worker_pid"] == survivor.pid
        assert redone.owner_pid == survivor.pid
        # every job finished by one of our two workers
        assert {v.options["worker_pid"] for v in done} <= pids

        # never twice in effect: one version per job (number 1 of its corpus), one
        # "trained" record per version, one queue job per version
        db.expire_all()
        per_corpus = dict(
            db.execute(
                select(GrammarVersion.corpus_id, func.count(GrammarVersion.id)).group_by(
                    GrammarVersion.corpus_id
                )
            ).all()
        )
        assert per_corpus == {c.id: 1 for c in corpora}
        assert sorted(v.number for v in done) == [1] * JOBS
        trained = db.scalars(select(Event.detail).where(Event.kind == "grammar.trained")).all()
        assert sorted(d["version"] for d in trained) == [1] * JOBS

        def queue_jobs_ended() -> dict[str, Any] | None:
            rows = db.execute(
                text(
                    "SELECT lock, status::text AS status, attempts FROM procrastinate_jobs "
                    "WHERE task_name = 'treewright.train_version'"
                )
            ).all()
            db.rollback()
            if any(row.status in ("todo", "doing") for row in rows):
                return None  # a job's row is finished just before its queue job is
            return {row.lock: row for row in rows}

        jobs = _wait("the queue jobs ended", queue_jobs_ended, [survivor])
        assert set(jobs) == {f"treewright.train_version:{vid}" for vid in versions}
        assert {row.status for row in jobs.values()} == {"succeeded"}
        # the killed job is the queue's same job, put back once its worker went silent
        assert jobs[f"treewright.train_version:{victim_job}"].attempts >= 1
    finally:
        db.close()
        errors = [_stop(w) for w in workers]
    assert "Traceback" not in errors[1], errors[1]


def test_workers_refuse_sqlite(tmp_path: Any) -> None:
    sqlite = Settings(data_dir=tmp_path, job_runner="workers", secret_key="x")
    with pytest.raises(ValueError, match="needs PostgreSQL"):
        create_app(sqlite, migrate=False)
    out = subprocess.run(
        [sys.executable, "-c", "from app.entry import run; run()", "worker"],
        cwd=PROJECT_ROOT,
        env={**os.environ, "TREEWRIGHT_DATA_DIR": str(tmp_path), "TREEWRIGHT_DATABASE_URL": ""},
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert out.returncode == 1
    assert "treewright worker needs PostgreSQL" in out.stderr


def _queue_jobs(db: Session) -> list[Any]:
    rows = db.execute(
        text(
            "SELECT task_name, lock, status::text AS status, priority, args "
            "FROM procrastinate_jobs ORDER BY id"
        )
    ).all()
    db.rollback()
    return list(rows)


@needs_postgres
def test_queue_runner_puts_one_queue_job_per_row(queue_app: Any) -> None:
    factory = queue_app.state.sessionmaker
    db: Session = factory()
    try:
        corpus = create_corpus(db, "Pier notes")
        runner = training.get_runner(queue_app.state)
        first = training.schedule_training(queue_app.state, corpus.id, "queue test")
        again = training.schedule_training(queue_app.state, corpus.id, "asked twice")
        runner.kick()
        assert again.id == first.id
        lock = f"treewright.train_version:{first.id}"
        jobs = _queue_jobs(db)
        assert [(j.task_name, j.lock, j.status, j.args) for j in jobs] == [
            ("treewright.train_version", lock, "todo", {"version_id": first.id})
        ]
        # a worker has taken the job (as the queue sees it): no second job for the row
        db.execute(text("UPDATE procrastinate_jobs SET status = 'doing'"))
        db.commit()
        runner.kick()
        assert [j.status for j in _queue_jobs(db)] == ["doing"]

        # a findings run gets a job of its own, after grammars in the queue's order
        run = findings.queue_run(db, corpus.id, reason="queue test")
        db.commit()
        runner.kick()
        jobs = _queue_jobs(db)
        assert [(j.task_name, j.args) for j in jobs] == [
            ("treewright.train_version", {"version_id": first.id}),
            ("treewright.find_inconsistencies", {"run_id": run.id}),
        ]
        assert jobs[0].priority > jobs[1].priority
    finally:
        db.close()


@needs_postgres
def test_a_hand_in_defers_the_refresh_to_the_queue_and_its_job_fills_the_lookahead(
    settings: Settings, queue_app: Any, db: Session, people: Any
) -> None:
    """With workers, the refresh after a hand-in is a queue job (one waiting per annotator
    and corpus), not work of the server's process; the job, run as a worker runs it, parses
    the look-ahead under the active grammar, and run again it parses nothing more."""
    from app import jobs
    from tests.app.bench_helpers import assign, install_grammar, make_corpus
    from tests.app.conftest import LoggedIn
    from tests.app.test_refresh_lazy import TEXTS, _complete_under, _hand_in, demo_grammar_bytes

    corpus, sentences = make_corpus(db, TEXTS[:6])
    assign(db, sentences, people.ann1)
    corpus.settings = {**corpus.settings, "refresh_lookahead": 2}
    db.commit()
    version = install_grammar(db, corpus, demo_grammar_bytes(3))
    ids = [s.id for s in sentences]
    ann1 = LoggedIn(queue_app, "ann1")
    _hand_in(ann1, sentences[0])
    # (the test client runs a background task before the call returns: none was run)
    assert _complete_under(db, version.id) == set()
    wanted = {"corpus_id": corpus.id, "user_id": people.ann1.id, "k": settings.suggestion_k}
    assert [(j.task_name, j.status, j.args) for j in _queue_jobs(db)] == [
        (jobs.REFRESH, "todo", wanted)
    ]
    _hand_in(ann1, sentences[1])  # while the job waits: no second job
    assert len(_queue_jobs(db)) == 1
    with jobs._worker_state(settings):
        assert jobs.refresh_job(**wanted) == "parsed 2"
        assert _complete_under(db, version.id) == {ids[2], ids[3]}
        assert jobs.refresh_job(**wanted) == "parsed 0"  # delivered twice: nothing more
