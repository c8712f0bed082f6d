"""Background jobs on a PostgreSQL task queue, run by ``treewright worker`` processes.

With the setting ``job_runner = "workers"`` (PostgreSQL only) a server does not train grammars,
run the inconsistency finder or parse the look-ahead after a hand-in itself: for each queued
grammar version, findings run and hand-in it puts a job on a queue kept in the same
PostgreSQL database (procrastinate, see DEVELOPERS.md for the choice), and any number of
``treewright worker`` processes, on this machine or on others that reach the database, take
the jobs one at a time each. On SQLite, and by default,
the per-server runner of :mod:`app.services.training` runs them as before.

This module is only the runner: a job calls the same service functions as the in-process
runner (:func:`app.services.training.take` and ``run_version``,
:func:`app.services.findings.claim_run` and ``run_finder``,
:func:`app.services.refresh.refresh_after_hand_in`). It imports procrastinate, which
the ``postgres`` extra installs; nothing else imports it at start-up.

Never lost, never twice in effect
    * The service row (a GrammarVersion, a FindingRun) is the unit of work and the truth; a
      queue job only says "run row N". A job starts with a compare-and-set on its row
      (``queued -> training``, or a take-over from an owner that is gone), so a job delivered
      twice, or two jobs for one row, run the row at most once at a time, and a job whose row
      is finished does nothing. One version row per training job, whatever the deliveries:
      a re-run keeps the row's id and number.
    * What a job stores is committed in one transaction at its end (the grammar, the
      version's status and its event; a findings run's findings), so a job cut short leaves
      nothing half-written and its re-run writes it once.
    * A worker killed mid-job (``kill -9``, a lost machine): procrastinate records a heartbeat
      per worker; every worker sweeps every ``worker_stalled_seconds / 3`` seconds and puts
      the jobs of workers silent for ``worker_stalled_seconds`` back on the queue
      (procrastinate's ``get_stalled_jobs`` and ``retry_job``). The next worker takes the row
      over: its owner (app.services.owners.owner_gone: our own heartbeat, or a dead process
      on the same host) is gone, so it trains the version (or finds the run) again from the
      start. A retry that finds the owner alive (a slow worker) does nothing, and a process
      whose run was taken over writes nothing (findings.take_run, findings._run).
    * The sweep also queues again a training row whose owner is gone (``fail_interrupted``
      with ``requeue``) and puts a job on the queue for every queued row that has none, so a
      row is picked up even if its queue job was lost or was never made (queued while the
      server ran jobs itself, or by a command).
    * The queue's ``lock`` (one running job per row) and ``queueing_lock`` (one waiting job per
      row) keep the queue free of pile-ups; they are not what makes a re-run safe, the row is.

Limits: a version that had become active and was refreshing its suggestions when its worker
died stays ``ready`` with the refresh unfinished (sentences fall back to on-demand parsing).
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import os
import socket
import time
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import procrastinate
from procrastinate.exceptions import AlreadyEnqueued, UniqueViolation
from procrastinate.jobs import Status
from procrastinate.schema import SchemaManager
from sqlalchemy import func, select
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker

from app.models import GV_QUEUED, GV_TRAINING, RUN_QUEUED, RUN_RUNNING, FindingRun, GrammarVersion
from app.services import findings, refresh, training
from app.services.admission import configure_from
from app.settings import Settings

log = logging.getLogger(__name__)

#: The queue Treewright's jobs go on (a database may hold other applications' queues too).
QUEUE = "treewright"
TRAIN = "treewright.train_version"
FIND = "treewright.find_inconsistencies"
REFRESH = "treewright.refresh_after_hand_in"
#: The refresh after a hand-in goes before trainings and findings runs (it is short, and the
#: annotator's next sentences wait for it).
REFRESH_PRIORITY = 2
#: PostgreSQL advisory lock taken while the queue's schema is applied (any constant of ours).
SCHEMA_LOCK = 0x7472_6565
#: Failures of the job itself (the database unreachable while claiming): tried again with
#: waits of 2, 4, 8... s. A failed training is not one: it lands in the version's row.
RETRY = procrastinate.RetryStrategy(max_attempts=8, exponential_wait=2)


class WorkersNeedPostgres(ValueError):
    """``job_runner = "workers"`` or ``treewright worker`` on a database that is not
    PostgreSQL."""


def conninfo(settings: Settings) -> str:
    """The database URL as psycopg's connection string; WorkersNeedPostgres on SQLite."""
    url = make_url(settings.resolved_database_url)
    if url.get_backend_name() != "postgresql":
        raise WorkersNeedPostgres(
            "background workers need PostgreSQL: set TREEWRIGHT_DATABASE_URL to "
            f"postgresql+psycopg://user@host/dbname (the database is {url.get_backend_name()})"
        )
    return url.set(drivername="postgresql").render_as_string(hide_password=False)


def ensure_schema(settings: Settings) -> bool:
    """Create the queue's tables and functions in the database unless they exist (the
    schema of the installed procrastinate). Under an advisory lock, so that workers and
    servers starting at once apply it once. True when it was applied now."""
    import psycopg

    with psycopg.connect(conninfo(settings), autocommit=True) as conn, conn.transaction():
        conn.execute("SELECT pg_advisory_xact_lock(%s)", (SCHEMA_LOCK,))
        found = conn.execute("SELECT to_regclass('procrastinate_jobs')").fetchone()
        if found is not None and found[0] is not None:
            return False
        conn.execute(SchemaManager.get_schema())
    log.info("created the job queue's tables (procrastinate %s)", procrastinate.__version__)
    return True


# --------------------------------------------------------------------------------------------
# putting jobs on the queue


@dataclass(frozen=True)
class Waiting:
    """A queued row that needs a queue job: a grammar version (TRAIN) or a findings run."""

    task: str
    row_id: int

    @property
    def lock(self) -> str:
        return f"{self.task}:{self.row_id}"

    @property
    def kwargs(self) -> dict[str, int]:
        return {"version_id" if self.task == TRAIN else "run_id": self.row_id}

    @property
    def priority(self) -> int:
        return 1 if self.task == TRAIN else 0  # grammars first, as the in-process drain does


def waiting(factory: sessionmaker[Session]) -> list[Waiting]:
    """Every queued grammar version (oldest first) and queued findings run."""
    with factory() as db:
        versions = db.scalars(
            select(GrammarVersion.id)
            .where(GrammarVersion.status == GV_QUEUED)
            .order_by(GrammarVersion.created_at, GrammarVersion.id)
        ).all()
        runs = db.scalars(
            select(FindingRun.id).where(FindingRun.status == RUN_QUEUED).order_by(FindingRun.id)
        ).all()
    return [Waiting(TRAIN, v) for v in versions] + [Waiting(FIND, r) for r in runs]


def enqueue(app: procrastinate.App, jobs: list[Waiting]) -> int:
    """Put a queue job for each row that has none waiting or running; how many were put.

    A row whose job is running, as the queue sees it, gets none: if that job's worker is
    dead, the queue's stalled-job recovery puts the same job back (:func:`_retry_stalled`)."""
    if not jobs:
        return 0
    running = {
        row["lock"]
        for row in app.connector.get_sync_connector().execute_query_all(
            query="SELECT lock FROM procrastinate_jobs "
            "WHERE status = 'doing' AND lock = ANY(%(locks)s)",
            locks=[job.lock for job in jobs],
        )
    }
    put = 0
    for job in jobs:
        if job.lock in running:
            continue
        deferrer = app.configure_task(
            job.task, queue=QUEUE, lock=job.lock, queueing_lock=job.lock, priority=job.priority
        )
        with contextlib.suppress(AlreadyEnqueued):  # a waiting job for this row exists
            deferrer.defer(**job.kwargs)
            put += 1
    return put


def sync_app(settings: Settings) -> procrastinate.App:
    """An opened procrastinate app for putting jobs on the queue from ordinary (threaded)
    code: a small pool of its own (one connection kept)."""
    connector = procrastinate.SyncPsycopgConnector(
        conninfo=conninfo(settings), min_size=1, max_size=2
    )
    return procrastinate.App(connector=connector).open()


class QueueRunner:
    """The server's side with ``job_runner = "workers"``: instead of running jobs, it puts
    them on the queue (same interface as app.services.training.TrainingRunner)."""

    def __init__(self, factory: sessionmaker[Session], settings: Settings) -> None:
        self.factory = factory
        self.settings = settings
        self.last_error: BaseException | None = None
        ensure_schema(settings)
        self._app = sync_app(settings)

    def recover(self) -> None:
        """On start: queue again the jobs whose owner is gone; the sweep of the workers does
        the same all the time."""
        training.fail_interrupted(self.factory, requeue=True)

    def kick(self) -> None:
        """Put a queue job for every queued row that has none (milliseconds)."""
        try:
            enqueue(self._app, waiting(self.factory))
        except Exception as exc:  # noqa: BLE001 - the rows stay queued; a worker's sweep finds them
            self.last_error = exc
            log.error("could not put jobs on the queue: %r", exc)

    def defer_refresh(self, corpus_id: int, user_id: int, k: int) -> bool:
        """Put the look-ahead refresh after a hand-in on the queue (:func:`refresh_job`);
        one waiting job per annotator and corpus (a hand-in while one waits adds none: that
        job parses the look-ahead as it stands when it runs). False when the queue could not
        be reached (the caller then refreshes in its own process)."""
        lock = f"{REFRESH}:{corpus_id}:{user_id}"
        deferrer = self._app.configure_task(
            REFRESH, queue=QUEUE, lock=lock, queueing_lock=lock, priority=REFRESH_PRIORITY
        )
        try:
            with contextlib.suppress(AlreadyEnqueued):
                deferrer.defer(corpus_id=corpus_id, user_id=user_id, k=k)
        except Exception as exc:  # noqa: BLE001 - the hand-in is stored; refresh here instead
            self.last_error = exc
            log.error("could not put the refresh on the queue: %r", exc)
            return False
        return True

    def wait_idle(self, timeout: float = 600.0) -> None:
        """Block until no grammar version or findings run is queued or running (scripts and
        tests; the work itself happens in the workers)."""
        deadline = time.monotonic() + timeout
        while busy(self.factory):
            if time.monotonic() > deadline:
                raise TimeoutError("the workers are still busy")
            time.sleep(0.2)

    def shutdown(self, wait: bool = True) -> None:
        self._app.close()


def busy(factory: sessionmaker[Session]) -> int:
    """How many grammar versions and findings runs are queued or running."""
    with factory() as db:
        versions = db.scalar(
            select(func.count(GrammarVersion.id)).where(
                GrammarVersion.status.in_((GV_QUEUED, GV_TRAINING))
            )
        )
        runs = db.scalar(
            select(func.count(FindingRun.id)).where(
                FindingRun.status.in_((RUN_QUEUED, RUN_RUNNING))
            )
        )
    return int(versions or 0) + int(runs or 0)


# --------------------------------------------------------------------------------------------
# the worker


@dataclass
class _Worker:
    factory: sessionmaker[Session]
    deferrer: procrastinate.App


_WORKER: _Worker | None = None


def _worker() -> _Worker:
    if _WORKER is None:
        raise RuntimeError("Treewright's queue jobs run inside `treewright worker` only")
    return _WORKER


def train_version(version_id: int) -> str:
    """The queue job of one grammar version (see the module docstring)."""
    state = _worker()
    if not training.take(state.factory, version_id):
        return "nothing to do: the version is finished or a live process trains it"
    training.run_version(state.factory, version_id)
    enqueue(state.deferrer, waiting(state.factory))  # the findings run the version queued
    return "trained"


def find_inconsistencies(context: procrastinate.JobContext, run_id: int) -> str:
    """The queue job of one findings run: it runs only when it can take the run
    (:func:`app.services.findings.take_run`: queued, or running under an owner that is gone),
    so a retry of a run a live-but-slow worker still runs does nothing."""
    state = _worker()
    if not findings.take_run(state.factory, run_id):
        return "nothing to do: the run is finished or a live process runs it"
    findings.run_finder(state.factory, run_id)
    return "found"


def refresh_job(corpus_id: int, user_id: int, k: int) -> str:
    """The queue job of the look-ahead refresh after a hand-in
    (:func:`app.services.refresh.refresh_after_hand_in`): idempotent, since it parses only
    the look-ahead sentences that lack a complete suggestion of the active version, so a
    job run twice (or after the sentences were opened and parsed) does nothing more."""
    parsed = refresh.refresh_after_hand_in(_worker().factory, corpus_id, user_id, k=k)
    return f"parsed {parsed}"


def make_worker_app(settings: Settings) -> procrastinate.App:
    """The procrastinate app a worker runs: Treewright's three job kinds on its queue."""
    connector = procrastinate.PsycopgConnector(conninfo=conninfo(settings), min_size=1, max_size=4)
    app = procrastinate.App(connector=connector)
    app.task(name=TRAIN, queue=QUEUE, retry=RETRY)(train_version)
    app.task(name=FIND, queue=QUEUE, retry=RETRY, pass_context=True)(find_inconsistencies)
    app.task(name=REFRESH, queue=QUEUE, retry=RETRY)(refresh_job)
    return app


def sweep(state: _Worker) -> tuple[int, int]:
    """One recovery pass (see the module docstring): queue again the rows whose owner is
    gone and put a job for every queued row without one. Returns (rows queued again, jobs
    put); the jobs of silent workers are retried by :func:`_sweep_forever`."""
    requeued = training.fail_interrupted(state.factory, requeue=True)
    put = enqueue(state.deferrer, waiting(state.factory))
    return requeued, put


async def _retry_stalled(app: procrastinate.App, stalled_seconds: float) -> int:
    """Put the jobs of workers silent for ``stalled_seconds`` back on the queue."""
    stalled = list(
        await app.job_manager.get_stalled_jobs(queue=QUEUE, seconds_since_heartbeat=stalled_seconds)
    )
    for job in stalled:
        try:
            await app.job_manager.retry_job(job)
            log.warning("job %s (%s) lost its worker; queued again", job.id, job.task_name)
        except UniqueViolation:
            # the sweep already put a new job for the row (its owner was seen gone first):
            # that one runs it; close this one
            await app.job_manager.finish_job(job, status=Status.FAILED, delete_job=False)
            log.warning("job %s (%s) lost its worker; its row has a new job", job.id, job.task_name)
    return len(stalled)


async def _sweep_forever(app: procrastinate.App, state: _Worker, stalled_seconds: float) -> None:
    every = max(stalled_seconds / 3, 0.2)
    while True:
        try:
            await _retry_stalled(app, stalled_seconds)
            await asyncio.to_thread(sweep, state)
        except Exception:  # noqa: BLE001 - the next pass tries again
            log.exception("the worker's recovery sweep failed")
        await asyncio.sleep(every)


@contextlib.contextmanager
def _worker_state(settings: Settings) -> Iterator[_Worker]:
    global _WORKER
    from app.db import make_engine, make_sessionmaker

    engine = make_engine(settings)
    state = _Worker(make_sessionmaker(engine), sync_app(settings))
    _WORKER = state
    try:
        yield state
    finally:
        _WORKER = None
        state.deferrer.close()
        engine.dispose()


def describe() -> str:
    return f"{socket.gethostname()}:{os.getpid()}"


def run_worker(settings: Settings, *, name: str | None = None) -> None:
    """Run a worker until SIGINT or SIGTERM (which let the running job finish first)."""
    configure_from(settings)  # its background parses keep to the same bounds as a server's
    ensure_schema(settings)
    stalled = settings.worker_stalled_seconds
    app = make_worker_app(settings)
    options: dict[str, Any] = {
        "queues": [QUEUE],
        "name": name or describe(),
        "concurrency": 1,  # training is CPU-bound: run more workers for more at once
        "update_heartbeat_interval": max(stalled / 4, 0.1),
        "stalled_worker_timeout": stalled,
        "fetch_job_polling_interval": max(min(stalled / 3, 5.0), 0.2),
    }

    async def main() -> None:
        with _worker_state(settings) as state:
            async with app.open_async():
                sweeper = asyncio.create_task(_sweep_forever(app, state, stalled))
                try:
                    await app.run_worker_async(**options)
                finally:
                    sweeper.cancel()
                    with contextlib.suppress(asyncio.CancelledError):
                        await sweeper

    asyncio.run(main())
