"""Retrain on all GUM trees as a background job, and time it.

Imports every file of ../shared/data/gum-trees (GUM, Zeldes 2017, CC BY) as gold into a fresh
corpus of a fresh SQLite database, then asks the service for a new grammar version exactly as
the Grammars page's button does (``schedule_training`` on the app's runner: a separate
process). While the job runs, the script keeps calling the service's health endpoint and
prints the latency beside the idle latency measured before, then prints the job's figures:
wall time from "train now" to an active grammar, the time the job recorded, its split
(loading, training on the slice and parsing the held-out gold, training on all gold) and the
held-out labelled F1 (PARSEVAL, parser.scoring defaults).

After the grammar is active the job goes on to refresh the suggestions of sentences nobody has
started; with ``--wait-refresh`` the script waits for that too and prints its time.

Usage: .venv/bin/python bench/retrain_gum.py [--files N] [--wait-refresh] [--keep DIR]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from fastapi.testclient import TestClient  # noqa: E402

from app.main import create_app  # noqa: E402
from app.models import GV_QUEUED, GV_READY, GV_TRAINING, GrammarVersion  # noqa: E402
from app.services import training  # noqa: E402
from app.services.corpora import create_corpus  # noqa: E402
from app.services.imports import import_bytes  # noqa: E402
from app.settings import Settings  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"


def latency_ms(client: TestClient, n: int) -> list[float]:
    out = []
    for _ in range(n):
        t = time.perf_counter()
        resp = client.get("/api/health")
        out.append((time.perf_counter() - t) * 1000)
        if resp.status_code != 200:
            raise SystemExit(f"health answered {resp.status_code}")
    return out


def describe(samples: list[float]) -> str:
    if not samples:
        return "no samples"
    qs = statistics.quantiles(samples, n=20) if len(samples) >= 20 else [max(samples)] * 19
    return (
        f"median {statistics.median(samples):.1f} ms, 95th percentile {qs[18]:.1f} ms, "
        f"max {max(samples):.1f} ms over {len(samples)} requests"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--files", type=int, default=0, help="only the first N GUM files")
    ap.add_argument(
        "--wait-refresh",
        action="store_true",
        help="also wait for the suggestion refresh that follows activation",
    )
    ap.add_argument("--keep", type=Path, help="data folder to use and keep (default: temp)")
    args = ap.parse_args()
    if not GUM.is_dir():
        raise SystemExit(f"GUM trees not found at {GUM}")
    files = sorted(GUM.glob("*.ptb"))
    if args.files:
        files = files[: args.files]

    data_dir = args.keep or Path(tempfile.mkdtemp(prefix="tw-bench-"))
    settings = Settings(data_dir=data_dir, secret_key="bench", training_in_process=False)
    app = create_app(settings)
    factory = app.state.sessionmaker
    t0 = time.perf_counter()
    with factory() as db:
        corpus = create_corpus(db, "GUM bench", settings={"retrain_every": 0})
        db.commit()
        corpus_id = corpus.id
        trees = 0
        for path in files:
            trees += import_bytes(
                db, path.read_bytes(), source=path.name, corpus_name="GUM bench", kind="gold"
            ).imported
    print(
        f"imported {trees} GUM trees from {len(files)} files as gold in "
        f"{time.perf_counter() - t0:.1f} s (database in {data_dir})"
    )

    client = TestClient(app)
    idle = latency_ms(client, 200)
    runner = training.get_runner(app.state)
    assert not runner.in_process
    t_start = time.perf_counter()
    version = training.schedule_training(app.state, corpus_id, "bench: all GUM trees")
    busy: list[float] = []
    last_message = ""
    t_ready = t_done = None
    while True:
        busy.extend(latency_ms(client, 5))
        with factory() as db:
            row = db.get(GrammarVersion, version.id)
            assert row is not None
            status, progress, message = row.status, row.progress, row.message
        if message != last_message:
            print(
                f"  {time.perf_counter() - t_start:7.1f} s  {status:9s} {progress:5.2f}  {message}"
            )
            last_message = message
        if status not in (GV_QUEUED, GV_TRAINING):
            if t_ready is None:
                t_ready = time.perf_counter() - t_start
            if status != GV_READY or progress >= 1.0 or not args.wait_refresh:
                t_done = time.perf_counter() - t_start
                break
        time.sleep(0.2)

    with factory() as db:
        row = db.get(GrammarVersion, version.id)
        assert row is not None
        opts = row.options or {}
        print()
        print(
            f"version {row.number}: {row.status}; {row.training_size} gold trees, "
            f"{row.heldout_size} held out (every {opts.get('heldout_every')}th sentence id)"
        )
        if row.heldout_f1 is not None:
            h = opts.get("heldout", {})
            print(
                f"held-out labelled F1 {row.heldout_f1:.4f} (P {h.get('precision', 0):.4f}, "
                f"R {h.get('recall', 0):.4f}, exact {h.get('exact', 0):.3f}, "
                f"{h.get('fallbacks', 0)} fallback parses)"
            )
        print(f"wall time from 'train now' to the active grammar: {t_ready:.1f} s")
        print(
            f"job time recorded (train_seconds): {row.train_seconds:.1f} s; split: "
            + ", ".join(f"{k} {v:.1f} s" for k, v in opts.get("timing", {}).items())
        )
        if args.wait_refresh:
            print(f"with the suggestion refresh: {t_done:.1f} s; {row.message}")
    print(f"health endpoint idle:           {describe(idle)}")
    print(f"health endpoint while training: {describe(busy)}")
    runner.shutdown(wait=False)
    app.state.engine.dispose()


if __name__ == "__main__":
    main()
