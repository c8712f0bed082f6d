"""Peak memory and time of a big plain-text import: streamed and staged vs. read whole.

Usage:
    python bench/import_memory.py [--sentences 1000000] [--whole-at 100000]

Writes a file of invented sentences (5-40 tokens each, words drawn from a small made-up
vocabulary with a fixed seed), then imports it into a fresh SQLite database in a child
process, once per way, and prints each child's own peak resident memory (``ru_maxrss``) and
wall time side by side:

* ``staged``: ``app.services.staged_import.import_path`` (what the CLI, the API and the
  Transfer page use for text and gold): two streamed passes, chunks of
  ``STAGE_CHUNK`` sentences committed one at a time, one publishing UPDATE;
* ``whole``: ``app.services.imports.import_file`` (the file read, decoded and parsed whole,
  then written in one transaction), at ``--whole-at`` sentences (it holds everything in
  memory, so a million would take gigabytes).

Each figure is also given per 1,000 sentences, so the two sizes compare. The goal it checks:
a 1,000,000-sentence import under 500 MB.
"""

from __future__ import annotations

import argparse
import os
import random
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

WORDS = (
    "tide quay ferry mate rope winch hull deck bell crane gull buoy lock sluice barge "
    "the a of at on under over rang turned filled waited drifted early late north "
    "south . ,"
).split()


def write_file(path: Path, count: int, seed: int = 7) -> None:
    rng = random.Random(seed)
    with path.open("w", encoding="utf-8") as out:
        for i in range(count):
            words = [rng.choice(WORDS) for _ in range(rng.randint(4, 39))]
            out.write(" ".join(words) + f" n{i} .\n")  # n{i}: every sentence distinct


CHILD = """
import resource, sys, time
from pathlib import Path
from app.db import make_engine, make_sessionmaker, upgrade_to_head
from app.settings import Settings
way, folder, path = sys.argv[1], Path(sys.argv[2]), Path(sys.argv[3])
settings = Settings(data_dir=folder, secret_key="bench")
upgrade_to_head(settings)
db = make_sessionmaker(make_engine(settings))()
start = time.perf_counter()
if way == "staged":
    from app.services.staged_import import import_path
    result = import_path(db, path, corpus_name="Harbour", kind="text")
else:
    from app.services.imports import import_file
    result = import_file(db, path, corpus_name="Harbour", kind="text")
print(result.imported, time.perf_counter() - start,
      resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
"""


def run(way: str, path: Path) -> tuple[int, float, float]:
    """(sentences imported, seconds, peak MB) of one import in a child process."""
    with tempfile.TemporaryDirectory() as folder:
        proc = subprocess.run(
            [sys.executable, "-c", CHILD, way, folder, str(path)],
            cwd=ROOT,
            capture_output=True,
            text=True,
            check=False,
        )
        if proc.returncode != 0:
            raise SystemExit(f"{way} import failed:\n{proc.stderr[-2000:]}")
        imported, seconds, peak_mb = proc.stdout.split()[-3:]
        return int(imported), float(seconds), float(peak_mb)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sentences", type=int, default=1_000_000)
    ap.add_argument("--whole-at", type=int, default=100_000)
    args = ap.parse_args()
    print("load:", os.getloadavg())
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        small, big = Path(tmp) / "small.txt", Path(tmp) / "big.txt"
        write_file(small, args.whole_at)
        rows.append(("staged", *run("staged", small)))
        rows.append(("whole", *run("whole", small)))
        write_file(big, args.sentences)
        print(f"file of {args.sentences:,} sentences: {big.stat().st_size / 2**20:.0f} MB")
        rows.append(("staged", *run("staged", big)))
    print(f"{'way':<8}{'sentences':>11}{'seconds':>9}{'peak MB':>9}{'MB/1k':>8}")
    for way, count, seconds, peak in rows:
        print(f"{way:<8}{count:>11,}{seconds:>9.1f}{peak:>9.0f}{peak / count * 1000:>8.2f}")
    print(f"peak_mb_staged_{args.sentences}={rows[-1][3]:.0f} (goal: under 500)")


if __name__ == "__main__":
    main()
