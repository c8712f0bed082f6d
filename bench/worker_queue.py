"""The job queue on PostgreSQL (app.jobs) against the per-server runner, side by side.

Makes a fresh database on a PostgreSQL server, imports the demo's 75 gold trees (app/demo,
invented) into ``--jobs`` corpora, then trains one grammar version per corpus, the same work
each round, four ways:

1. the queue with one ``treewright worker``;
2. the per-server runner (``job_runner = in_process``: one training process drains the rows);
3. the queue with two workers;
4. the queue with two workers, one killed with SIGKILL as soon as both train.

For each round it prints the wall time from queueing the jobs to the last one finished, how
soon the first job started (the per-server runner starts its process on the first job; workers
are started and listening before the round) and the median wait from queued to started; then
the ratios (one worker against the per-server runner: the queue's overhead; one worker against
two: the spread, which needs free cores to show) and, for round 4, the time from the kill
until the other worker takes the killed job over, and the versions per corpus at the end (one
per round: none trained twice).

Usage: .venv/bin/python bench/worker_queue.py [--url postgresql+psycopg://postgres@127.0.0.1/postgres]
       [--jobs 4] [--stalled 5]
(default URL: TREEWRIGHT_TEST_DATABASE_URL). Needs the postgres extra. Prints ``uptime``.
"""

from __future__ import annotations

import argparse
import os
import signal
import statistics
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from sqlalchemy import create_engine, func, select, text  # noqa: E402
from sqlalchemy.orm import Session, sessionmaker  # noqa: E402

from app.db import make_engine, make_sessionmaker, upgrade_to_head  # noqa: E402
from app.models import GV_QUEUED, GV_TRAINING, GrammarVersion  # noqa: E402
from app.services import training  # noqa: E402
from app.settings import Settings  # noqa: E402
from tests.app.review_helpers import import_demo_gold  # noqa: E402
from tests.app.worker_helpers import start_worker as spawn_worker  # noqa: E402


def start_worker(url: str, stalled: float, name: str, data: str) -> subprocess.Popen[bytes]:
    quiet = subprocess.DEVNULL
    return spawn_worker(url, data, stalled, name, stdout=quiet, stderr=quiet)


def stop(proc: subprocess.Popen[bytes]) -> None:
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=300)


def rows(factory: sessionmaker[Session], ids: list[int]) -> list[GrammarVersion]:
    with factory() as db:
        found = list(db.scalars(select(GrammarVersion).where(GrammarVersion.id.in_(ids))))
        for row in found:
            db.expunge(row)
        return found


def wait_until(what: str, check: Any, timeout: float = 1800.0, poll: float = 0.02) -> Any:
    deadline = time.monotonic() + timeout
    while not (found := check()):
        if time.monotonic() > deadline:
            raise SystemExit(f"not within {timeout} s: {what}")
        time.sleep(poll)
    return found


def started(url: str, count: int, workers: list[subprocess.Popen[bytes]]) -> None:
    """Wait until ``count`` workers listen to the queue (so rounds time jobs, not start-up)."""
    engine = create_engine(url)

    def listening() -> bool:
        if any(w.poll() is not None for w in workers):
            raise SystemExit("a worker ended at start-up")
        with engine.connect() as conn:
            return conn.scalar(text("SELECT count(*) FROM procrastinate_workers")) == count

    wait_until("the workers listening", listening)
    engine.dispose()


def train_round(
    factory: sessionmaker[Session], corpora: list[int], queue: Any, kill: Any = None
) -> dict[str, Any]:
    """Queue one version per corpus, then watch the rows until all are finished."""
    t0 = time.monotonic()
    ids: list[int] = []
    with factory() as db:
        for cid in corpora:
            ids.append(training.request_training(db, cid, reason="bench").id)
    queued_at = time.monotonic()
    queue()
    picked: dict[int, float] = {}
    out: dict[str, Any] = {}

    def all_done() -> bool:
        now = time.monotonic()
        current = rows(factory, ids)
        for row in current:
            if row.status != GV_QUEUED and row.id not in picked:
                picked[row.id] = now - queued_at
        if kill is not None:
            kill(current, out)
        return all(r.status not in (GV_QUEUED, GV_TRAINING) and r.progress >= 1.0 for r in current)

    wait_until("every version trained", all_done)
    out["wall"] = time.monotonic() - t0
    out["first"] = min(picked.values())
    out["pickup"] = statistics.median(picked.values())
    out["rows"] = rows(factory, ids)
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--url", default=os.environ.get("TREEWRIGHT_TEST_DATABASE_URL", ""))
    ap.add_argument("--jobs", type=int, default=4)
    ap.add_argument("--stalled", type=float, default=5.0)
    args = ap.parse_args()
    if not args.url.startswith("postgresql"):
        print(
            "skipped: the job queue needs a PostgreSQL server "
            "(--url postgresql+psycopg://user@host/db or TREEWRIGHT_TEST_DATABASE_URL)"
        )
        return

    name = f"tw_bench_queue_{uuid.uuid4().hex[:8]}"
    admin = create_engine(args.url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    url = f"{args.url.rsplit('/', 1)[0]}/{name}"
    data = tempfile.mkdtemp(prefix="tw-bench-queue-")
    try:
        settings = Settings(database_url=url, data_dir=Path(data), secret_key="bench")
        upgrade_to_head(settings)
        engine = make_engine(settings)
        factory = make_sessionmaker(engine)
        with factory() as db:
            corpora = [
                import_demo_gold(
                    db, f"Ferry log {i}", settings={"retrain_every": 0, "heldout_every": 8}
                ).id
                for i in range(args.jobs)
            ]
        results: dict[str, dict[str, Any]] = {}

        from app.jobs import QueueRunner

        queue = QueueRunner(factory, settings.model_copy(update={"job_runner": "workers"}))
        # not first, so that no round alone pays for writing the parser's compiled cache
        for label, count in (
            ("queue, 1 worker", 1),
            ("per-server runner", 0),
            ("queue, 2 workers", 2),
        ):
            if not count:  # one process of the server's own drains the rows
                local = training.TrainingRunner(factory, url=url, in_process=False)
                results[label] = train_round(factory, corpora, local.kick)
                local.shutdown()
                continue
            workers = [start_worker(url, args.stalled, f"w{i}", data) for i in range(count)]
            started(url, count, workers)
            results[label] = train_round(factory, corpora, queue.kick)
            for w in workers:
                stop(w)

        # 4. kill one of two workers as soon as both train
        workers = [start_worker(url, args.stalled, f"k{i}", data) for i in range(2)]
        started(url, 2, workers)
        by_pid = {w.pid: w for w in workers}

        def kill(current: list[GrammarVersion], out: dict[str, Any]) -> None:
            if "killed_at" not in out:
                owners = {r.owner_pid: r.id for r in current if r.status == GV_TRAINING}
                if set(by_pid) <= set(owners):
                    victim = workers[0]
                    os.kill(victim.pid, signal.SIGKILL)
                    victim.wait(timeout=60)  # reaped, as a shell or service manager would
                    out.update(killed_at=time.monotonic(), job=owners[victim.pid])
                return
            row = next(r for r in current if r.id == out["job"])
            if "retaken" not in out and row.owner_pid == workers[1].pid:
                out["retaken"] = time.monotonic() - out["killed_at"]

        killed = train_round(factory, corpora, queue.kick, kill)
        job = killed["job"]
        # when the other worker took the killed job over (the row's owner changed)
        redone = next(r for r in killed["rows"] if r.id == job)
        assert redone.options["worker_pid"] == workers[1].pid, redone.options
        results["queue, 2 workers, one killed"] = killed
        for w in workers:
            if w.poll() is None:
                stop(w)
        queue.shutdown()

        with factory() as db:
            count = select(func.count(GrammarVersion.id))
            per_corpus = [db.scalar(count.where(GrammarVersion.corpus_id == c)) for c in corpora]
        engine.dispose()

        print(f"{args.jobs} trainings of the demo's 75 gold trees each, per round")
        for label, res in results.items():
            print(
                f"  {label:30s} wall {res['wall']:7.2f} s   first job started after "
                f"{res['first']:6.3f} s   median wait {res['pickup']:6.2f} s"
            )
        one, two = results["queue, 1 worker"], results["queue, 2 workers"]
        base = results["per-server runner"]
        print(f"queue with 1 worker / per-server runner, wall: {one['wall'] / base['wall']:.2f}")
        print(f"queue with 1 worker / queue with 2 workers, wall: {one['wall'] / two['wall']:.2f}")
        print(
            f"killed worker: its job taken over by the other worker {killed['retaken']:.2f} s "
            f"after the kill (stalled after {args.stalled:g} s; the other worker first ends "
            f"its own job); round wall / round without a kill: {killed['wall'] / two['wall']:.2f}"
        )
        print(f"versions per corpus after 4 rounds: {per_corpus} (4 each: none trained twice)")
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()
        print("uptime:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())


if __name__ == "__main__":
    main()
