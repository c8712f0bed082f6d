"""A burst of uncached parses against a real server, with the parse pool bounded and not.

Usage:
    python bench/parse_burst.py [--clients 20] [--words 35] [--long 250] [--only bounded]

For each configuration a fresh SQLite database gets a grammar trained on the first GUM files
(Zeldes 2017, CC BY; the same grammar the tests use), ``--clients`` annotators and, for each,
one held-out GUM sentence of ``--words`` words (none parsed yet) plus one sentence of
``--long`` words made of GUM words. A uvicorn server runs with that configuration:

* ``unbounded``: ``PARSE_SLOTS=64``, ``PARSE_THREADS=2``, ``PARSE_MAX_WORDS=250``: every
  request parses at once on every core, as before the pool (the kernels no longer hold the
  GIL, so this is kinder than the old code);
* ``bounded``: the defaults: one parse per core, one numba thread each, first come first
  served, sentences over 100 words not parsed on request.

Then, measured side by side:

1. **burst**: every client opens its sentence's Bench page at the same moment while another
   client asks ``/api/health`` every 50 ms: each page's time (and how many got 503 "busy"),
   the health p50 / p95 / max, the server's peak and settled resident memory (VmHWM, and VmRSS
   5 s after the burst, from /proc);
2. **long**: one client opens the long sentence (page, then its full suggestion) while another
   saves a tree 20 times: the save p50 / max, and how long the long sentence took.

The target (from the scale issue) for the burst: health p95 under 100 ms and every page drawn
within (parses ahead / workers + 1) parse times; for the long sentence: no save delayed past
500 ms. Clients, server and everything else on the machine share its cores: read the figures
beside the load average printed with them.
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

import httpx  # noqa: E402

from app.db import make_engine, make_sessionmaker, upgrade_to_head  # noqa: E402
from app.models import Assignment  # noqa: E402
from app.settings import Settings  # noqa: E402
from parser.trees import words as tree_words  # noqa: E402
from tests.app.bench_helpers import (  # noqa: E402
    flat_text,
    gum_grammar_bytes,
    heldout_gum_trees,
    install_grammar,
    make_corpus,
)
from tests.app.conftest import PASSWORD  # noqa: E402
from tests.app.live_server import Client, LiveServer, add_annotators  # noqa: E402

CONFIGS = {
    "unbounded": {
        "TREEWRIGHT_PARSE_SLOTS": "64",
        "TREEWRIGHT_PARSE_THREADS": "2",
        "TREEWRIGHT_PARSE_MAX_WORDS": "250",
        "TREEWRIGHT_PARSE_WAIT_SECONDS": "600",
    },
    "bounded": {},
}


def seed(
    settings: Settings, clients: int, n_words: int, long_words: int
) -> tuple[list[int], int, int]:
    """The sentences: one per client, the long one, one for the saver."""
    upgrade_to_head(settings)
    engine = make_engine(settings)
    db = make_sessionmaker(engine)()
    try:
        trees = heldout_gum_trees(clients, min_words=n_words, max_words=n_words)
        if len(trees) < clients:
            sys.exit(f"only {len(trees)} held-out GUM trees of {n_words} words")
        texts = [" ".join(tree_words(t)) for t in trees]
        pool = [w for t in heldout_gum_trees(200, 5, 40) for w in tree_words(t)]
        texts.append(" ".join(pool[:long_words]))
        texts.append("the crew ate")
        corpus, sentences = make_corpus(db, texts, name="burst", labels=[], tags=[])
        install_grammar(db, corpus, gum_grammar_bytes())
        people = add_annotators(db, "burst", clients + 2)
        for user, sentence in zip(people, sentences, strict=True):
            db.add(Assignment(sentence_id=sentence.id, user_id=user.id))
        db.commit()
        ids = [s.id for s in sentences]
        return ids[:clients], ids[clients], ids[clients + 1]
    finally:
        db.close()
        engine.dispose()


def _proc_kb(pid: int, field: str) -> int:
    """A VmXXX figure (kB) of a process and its children (uvicorn with one worker: itself)."""
    total = 0
    for p in [pid, *_children(pid)]:
        try:
            for line in Path(f"/proc/{p}/status").read_text().splitlines():
                if line.startswith(field + ":"):
                    total += int(line.split()[1])
        except OSError:
            continue
    return total


def _children(pid: int) -> list[int]:
    try:
        return [int(c) for c in Path(f"/proc/{pid}/task/{pid}/children").read_text().split()]
    except OSError:
        return []


def percentile(values: list[float], q: float) -> float:
    if not values:
        return float("nan")
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, int(round(q * (len(ordered) - 1))))]


def run(name: str, env: dict[str, str], args: argparse.Namespace) -> dict[str, float]:
    folder = Path(tempfile.mkdtemp(prefix="tw-burst-"))
    settings = Settings(data_dir=folder / "data", secret_key="burst-secret")
    out: dict[str, float] = {}
    try:
        mine, long_id, save_id = seed(settings, args.clients, args.words, args.long)
        live = LiveServer(settings, log=folder / "server.log", start_timeout=180)
        live.env.update(env)
        with live as server:
            assert server.proc is not None
            pid = server.proc.pid
            names = [f"burst{i}" for i in range(args.clients + 2)]
            clients = [Client(server.url, n, PASSWORD, timeout=900) for n in names]
            health = httpx.Client(base_url=server.url, timeout=60)
            # --- burst
            start = threading.Barrier(args.clients + 1)
            pages: list[float] = []
            busy = [0]
            stop = threading.Event()
            health_ms: list[float] = []

            def open_page(client: Client, sid: int) -> None:
                start.wait()
                t0 = time.perf_counter()
                resp = client.http.get(f"/bench/{sid}")
                pages.append(time.perf_counter() - t0)
                if resp.status_code == 503:
                    busy[0] += 1
                elif resp.status_code != 200:
                    print(f"  page {sid}: {resp.status_code}", file=sys.stderr)

            def poll() -> None:
                while not stop.is_set():
                    t0 = time.perf_counter()
                    health.get("/api/health")
                    health_ms.append((time.perf_counter() - t0) * 1000)
                    time.sleep(0.05)

            poller = threading.Thread(target=poll)
            poller.start()
            threads = [
                threading.Thread(target=open_page, args=(c, sid))
                for c, sid in zip(clients, mine, strict=False)
            ]
            for t in threads:
                t.start()
            t_burst = time.perf_counter()
            start.wait()
            for t in threads:
                t.join()
            burst_s = time.perf_counter() - t_burst
            stop.set()
            poller.join()
            out["burst: last page s"] = max(pages)
            out["burst: median page s"] = statistics.median(pages)
            out["burst: pages answered 503"] = busy[0]
            out["burst: whole burst s"] = burst_s
            out["health p50 ms"] = percentile(health_ms, 0.5)
            out["health p95 ms"] = percentile(health_ms, 0.95)
            out["health max ms"] = max(health_ms)
            out["peak memory MB"] = _proc_kb(pid, "VmHWM") / 1024
            time.sleep(5)
            out["memory 5 s after MB"] = _proc_kb(pid, "VmRSS") / 1024
            # --- long sentence beside a saver
            saver = clients[-1]
            saves: list[float] = []
            done = threading.Event()
            long_s = [0.0]

            def open_long() -> None:
                long_client = clients[args.clients]
                t0 = time.perf_counter()
                long_client.http.get(f"/bench/{long_id}")
                long_client.http.get(f"/api/bench/{long_id}/suggestion")
                long_s[0] = time.perf_counter() - t0
                done.set()

            opener = threading.Thread(target=open_long)
            opener.start()
            time.sleep(0.5)  # the long parse is under way
            head = 0
            for _ in range(20):
                t0 = time.perf_counter()
                resp = saver.save(
                    save_id, head, flat_text(["the", "crew", "ate"]), confirm_labels=True
                )
                saves.append((time.perf_counter() - t0) * 1000)
                if resp.status_code == 201:
                    head = resp.json()["revision"]["number"]
                time.sleep(0.2)
            opener.join()
            out["long: save p50 ms"] = percentile(saves, 0.5)
            out["long: save max ms"] = max(saves)
            out[f"long: {args.long}-word sentence opened s"] = long_s[0]
            for c in clients:
                c.close()
            health.close()
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--clients", type=int, default=20)
    ap.add_argument("--words", type=int, default=35)
    ap.add_argument("--long", type=int, default=250)
    ap.add_argument("--only", choices=list(CONFIGS), default=None)
    args = ap.parse_args()
    names = [args.only] if args.only else list(CONFIGS)
    results = {}
    for name in names:
        print(f"running {name} (load average {os.getloadavg()[0]:.1f})", flush=True)
        results[name] = run(name, CONFIGS[name], args)
    print(
        f"\n{args.clients} clients open uncached {args.words}-word sentences at once; "
        f"load average now {os.getloadavg()[0]:.1f}"
    )
    print(f"{'figure':<34}" + "".join(f"{n:>14}" for n in names))
    for key in results[names[0]]:
        print(f"{key:<34}" + "".join(f"{results[n][key]:>14.2f}" for n in names))


if __name__ == "__main__":
    main()
