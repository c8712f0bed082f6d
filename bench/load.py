"""Load on a real server: many annotators at once, page loads, saves and suggestion fetches.

Usage:
    python bench/load.py [--clients 20] [--seconds 30] [--workers 1]
                         [--database-url postgresql+psycopg://postgres@127.0.0.1/postgres]
                         [--compare-with postgresql+psycopg://postgres@127.0.0.1/postgres]

A fresh database (SQLite in a temporary folder, or a new database created on the PostgreSQL
server that ``--database-url`` names, dropped afterwards) gets the demo corpus of the invented
Saltmarrow ferry cooperative (app/demo): its gold trees, its raw sentences, a grammar trained
on the gold, and ``--clients`` annotators, each assigned a share of the raw sentences (two
annotators per sentence). A uvicorn server (``--workers`` processes) listens on 127.0.0.1
only. Each client logs in as its own annotator and, until the time is up (and at most
``MAX_REQUESTS`` requests), picks one of the following, then pauses ``--think`` seconds on
average (default 0: a stress test in which 20 clients keep the server saturated):

* ``page``: GET /queue, /bench/{id}, /corpora/{id} or / (a whole server-rendered page);
* ``save``: POST /api/bench/{id}/revisions of a tree of one of its sentences, based on its
  current head (the client owns the annotation, so a 409 would be a lost update: an error);
* ``suggest``: GET /api/bench/{id}/suggestion (the grammar's k best trees and posteriors;
  the first fetch of a sentence parses, later ones read the cached row).

A warm-up (``--warmup`` seconds, not counted) lets the server load the grammar and compile
the parser first. Prints, per kind, the count, p50, p95 and max latency in milliseconds and the
errors (any non-2xx answer or failed connection), beside the target p95 save < 100 ms. With
``--compare-with`` it runs the same load on SQLite and on that PostgreSQL server and prints
the two side by side. Clients and server share this machine's cores, so the figures include
the clients' own cost.

``--scale N`` replaces the demo corpus (whose few raw sentences are soon all parsed, so most
``suggest`` figures are cached reads) by the N-sentence corpus of bench/scale.py's generator
with a grammar trained on every GUM tree (Zeldes 2017, CC BY; ../shared/data/gum-trees); each
client is assigned ``--per-client`` of its raw sentences (two annotators per sentence), so a
``suggest`` mostly parses a sentence nobody asked for before, as on a large corpus.
"""

from __future__ import annotations

import argparse
import random
import shutil
import sys
import tempfile
import threading
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

import httpx  # noqa: E402
from sqlalchemy import create_engine, select, text  # noqa: E402

from app.db import make_engine, make_sessionmaker, upgrade_to_head  # noqa: E402
from app.demo.loader import DEMO_DIR  # noqa: E402
from app.models import Assignment, Corpus, Sentence, User  # noqa: E402
from app.security import hash_password  # noqa: E402
from app.services.imports import import_bytes  # noqa: E402
from app.services.training import run_training  # noqa: E402
from app.settings import Settings  # noqa: E402
from parser.trees import escape_word  # noqa: E402
from tests.app.live_server import Client, LiveServer  # noqa: E402

PASSWORD = "load-pass-1234"
CORPUS = "Saltmarrow load"
KINDS = ("page", "save", "suggest")
WEIGHTS = (0.4, 0.4, 0.2)
MAX_REQUESTS = 100_000  # per client: the loop is bounded by count as well as by time
TAGS = ("NN", "NNP", "VB", "DT", "JJ", "IN", "RB")
TARGET_SAVE_P95_MS = 100.0


@dataclass
class Tally:
    latencies: dict[str, list[float]] = field(default_factory=lambda: {k: [] for k in KINDS})
    errors: dict[str, int] = field(default_factory=lambda: {k: 0 for k in KINDS})
    samples: list[str] = field(default_factory=list)

    def add(self, other: Tally) -> None:
        for k in KINDS:
            self.latencies[k] += other.latencies[k]
            self.errors[k] += other.errors[k]
        self.samples += other.samples[:3]


# --------------------------------------------------------------------------- setup
def fresh_settings(folder: Path, database_url: str | None) -> tuple[Settings, str | None]:
    """Settings on a new, empty database; the PostgreSQL database name to drop, if any."""
    if not database_url:
        return Settings(data_dir=folder, secret_key="load-secret"), None
    name = "tw_load_" + uuid.uuid4().hex[:10]
    admin = create_engine(database_url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    admin.dispose()
    base = database_url.rsplit("/", 1)[0]
    return Settings(data_dir=folder, database_url=f"{base}/{name}", secret_key="load-secret"), name


def drop_database(database_url: str, name: str) -> None:
    admin = create_engine(database_url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    admin.dispose()


def _scale_corpus(settings: Settings, size: int) -> int:
    """bench/scale.py's corpus of ``size`` raw sentences with a grammar trained on every GUM
    tree, active; its id."""

    import scale

    from parser.grammar import train_grammar
    from tests.app.bench_helpers import install_grammar

    trees = scale.gum_trees()
    t0 = time.perf_counter()
    ids = scale.build(settings, size, trees)
    grammar = train_grammar(trees)
    engine = make_engine(settings)
    try:
        with make_sessionmaker(engine)() as db, tempfile.TemporaryDirectory() as tmp:
            grammar.save(Path(tmp) / "g.npz")
            corpus = db.get(Corpus, ids["corpus"])
            install_grammar(db, corpus, (Path(tmp) / "g.npz").read_bytes())
    finally:
        engine.dispose()
    print(f"scale corpus of {size} sentences and its grammar in {time.perf_counter() - t0:.0f} s")
    return ids["corpus"]


def seed(
    settings: Settings, clients: int, scale_size: int = 0, per_client: int = 200
) -> tuple[dict[str, list[int]], dict[int, list[str]], int]:
    """Demo corpus (or the scale corpus), a grammar, one annotator per client; returns each
    annotator's sentence ids, each sentence's words as a tree spells them and the corpus."""
    upgrade_to_head(settings)
    scale_corpus = _scale_corpus(settings, scale_size) if scale_size else None
    engine = make_engine(settings)
    db = make_sessionmaker(engine)()
    try:
        if scale_corpus is None:
            for path in sorted(DEMO_DIR.glob("gold_*.ptb")):
                import_bytes(
                    db, path.read_bytes(), source=path.name, corpus_name=CORPUS, kind="gold"
                )
            for path in sorted(DEMO_DIR.glob("raw_*.txt")):
                import_bytes(
                    db, path.read_bytes(), source=path.name, corpus_name=CORPUS, kind="text"
                )
            corpus = db.scalar(select(Corpus).where(Corpus.name == CORPUS))
            assert corpus is not None
            # the gold import queued the first version; train it here, as the demo does
            version = run_training(make_sessionmaker(engine), corpus.id, reason="load test")
            if version.status != "ready":
                sys.exit(f"the grammar did not train: {version.status} {version.message}")
        else:
            corpus = db.get(Corpus, scale_corpus)
            assert corpus is not None
        password_hash = hash_password(PASSWORD)
        users = [
            User(
                username=f"load{i:02d}",
                display_name=f"Load {i}",
                role="annotator",
                password_hash=password_hash,
            )
            for i in range(clients)
        ]
        db.add_all(users)
        db.flush()
        query = (
            select(Sentence.id, Sentence.tokens)
            .where(Sentence.corpus_id == corpus.id, Sentence.state == "queued")
            .order_by(Sentence.id)
        )
        if scale_corpus is not None:  # the last ones: the first carry the pairs' annotations
            last = clients * per_client // 2
            query = query.order_by(None).order_by(Sentence.id.desc()).limit(last)
        rows = db.execute(query).all()
        raw = [sid for sid, _ in rows]
        words = {sid: [escape_word(str(w)) for w in tokens] for sid, tokens in rows}
        mine: dict[str, list[int]] = {u.username: [] for u in users}
        for n, sid in enumerate(raw):  # two annotators per sentence, round robin
            for u in (users[(2 * n) % clients], users[(2 * n + 1) % clients]):
                if sid not in mine[u.username]:
                    db.add(Assignment(sentence_id=sid, user_id=u.id))
                    mine[u.username].append(sid)
        db.commit()
        return mine, words, corpus.id
    finally:
        db.close()
        engine.dispose()


# --------------------------------------------------------------------------- one client
def run_client(
    client: Client,
    sentences: list[int],
    words: dict[int, list[str]],
    corpus_id: int,
    warmup_until: float,
    stop_at: float,
    seed_value: int,
    out: Tally,
    lock: threading.Lock,
    think: float = 0.0,
) -> None:
    rnd = random.Random(seed_value)
    mine = Tally()
    heads = dict.fromkeys(sentences, 0)  # a fresh database: nothing saved yet
    for _ in range(MAX_REQUESTS):
        now = time.monotonic()
        if now > stop_at:
            break
        kind = rnd.choices(KINDS, WEIGHTS)[0]
        sid = rnd.choice(sentences)
        started = time.perf_counter()
        try:
            if kind == "page":
                url = rnd.choice(["/queue", f"/bench/{sid}", f"/corpora/{corpus_id}", "/"])
                resp = client.http.get(url)
            elif kind == "save":
                tree = (
                    "(ROOT (S " + " ".join(f"({rnd.choice(TAGS)} {w})" for w in words[sid]) + "))"
                )
                resp = client.save(sid, heads[sid], tree)
                if resp.status_code == 201:
                    heads[sid] = resp.json()["revision"]["number"]
            else:
                resp = client.http.get(f"/api/bench/{sid}/suggestion")
            ok = 200 <= resp.status_code < 300
            problem = f"{kind} {resp.request.url.path}: {resp.status_code} {resp.text[:120]}"
        except httpx.HTTPError as err:
            ok, problem = False, f"{kind}: {type(err).__name__} {err}"
        elapsed = (time.perf_counter() - started) * 1000
        if now < warmup_until:
            continue
        if ok:
            mine.latencies[kind].append(elapsed)
        else:
            mine.errors[kind] += 1
            mine.samples.append(problem)
        if think:
            time.sleep(rnd.uniform(0.5 * think, 1.5 * think))
    client.close()
    with lock:
        out.add(mine)


def percentile(values: list[float], q: float) -> float:
    if not values:
        return float("nan")
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, int(round(q * (len(ordered) - 1))))]


def run(database_url: str | None, args: argparse.Namespace) -> Tally:
    folder = Path(tempfile.mkdtemp(prefix="tw-load-"))
    settings, pg_name = fresh_settings(folder / "data", database_url)
    try:
        mine, words, corpus_id = seed(settings, args.clients, args.scale, args.per_client)
        tally = Tally()
        lock = threading.Lock()
        with LiveServer(settings, workers=args.workers, log=folder / "server.log") as server:
            clients = [
                (Client(server.url, name, PASSWORD, timeout=60), sids)
                for name, sids in sorted(mine.items())
                if sids
            ]
            start = time.monotonic()  # every client is logged in: the clock starts
            warmup_until = start + args.warmup
            stop_at = warmup_until + args.seconds
            threads = [
                threading.Thread(
                    target=run_client,
                    args=(
                        client,
                        sids,
                        words,
                        corpus_id,
                        warmup_until,
                        stop_at,
                        i,
                        tally,
                        lock,
                        args.think,
                    ),
                )
                for i, (client, sids) in enumerate(clients)
            ]
            for t in threads:
                t.start()
            for t in threads:
                t.join(timeout=args.warmup + args.seconds + 120)
            hung = sum(t.is_alive() for t in threads)
            if hung:
                tally.samples.append(f"{hung} client thread(s) still running at the end")
                tally.errors["page"] += hung
        return tally
    finally:
        if pg_name and database_url:
            drop_database(database_url, pg_name)
        shutil.rmtree(folder, ignore_errors=True)


def report(columns: dict[str, Tally], seconds: float) -> None:
    names = list(columns)
    head = f"{'kind':<8} {'':>8}" + "".join(f"{n:>28}" for n in names)
    print(head)
    print("-" * len(head))
    for kind in KINDS:
        for label, fn in (
            ("n", lambda v: f"{len(v)}"),
            ("p50 ms", lambda v: f"{percentile(v, 0.5):.1f}"),
            ("p95 ms", lambda v: f"{percentile(v, 0.95):.1f}"),
            ("max ms", lambda v: f"{max(v) if v else float('nan'):.1f}"),
        ):
            cells = "".join(f"{fn(columns[n].latencies[kind]):>28}" for n in names)
            print(f"{kind:<8} {label:>8}{cells}")
        cells = "".join(f"{columns[n].errors[kind]:>28}" for n in names)
        print(f"{kind:<8} {'errors':>8}{cells}")
    total = "".join(
        f"{sum(len(v) for v in columns[n].latencies.values()) / seconds:>24.1f} r/s" for n in names
    )
    print(f"{'all':<8} {'rate':>8}{total}")
    for n in names:
        p95 = percentile(columns[n].latencies["save"], 0.95)
        errors = sum(columns[n].errors.values())
        verdict = "met" if p95 < TARGET_SAVE_P95_MS and errors == 0 else "MISSED"
        print(
            f"{n}: p95 save {p95:.1f} ms, {errors} error(s); target p95 save < "
            f"{TARGET_SAVE_P95_MS:.0f} ms with no errors: {verdict}"
        )
        for sample in columns[n].samples[:5]:
            print(f"  e.g. {sample}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--clients", type=int, default=20)
    ap.add_argument("--seconds", type=float, default=30.0)
    ap.add_argument("--warmup", type=float, default=5.0)
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--scale", type=int, default=0, help="the scale generator's corpus size")
    ap.add_argument("--per-client", type=int, default=200)
    ap.add_argument(
        "--think",
        type=float,
        default=0.0,
        help="mean pause in seconds between a client's requests (0: none, each "
        "client sends its next request as soon as it has the answer)",
    )
    ap.add_argument(
        "--database-url",
        default=None,
        help="a PostgreSQL server URL; a fresh database is made on it",
    )
    ap.add_argument(
        "--compare-with",
        default=None,
        help="also run on this PostgreSQL server and print both side by side",
    )
    args = ap.parse_args()
    if args.clients < 2:
        ap.error("--clients must be at least 2")
    columns: dict[str, Tally] = {}
    first = "postgresql" if args.database_url else "sqlite"
    print(
        f"{args.clients} clients, {args.seconds:.0f} s after {args.warmup:.0f} s warm-up, "
        f"{args.workers} server worker(s), think time {args.think:g} s, loopback only"
    )
    columns[f"{first} ({args.workers}w)"] = run(args.database_url, args)
    if args.compare_with:
        columns[f"postgresql ({args.workers}w)"] = run(args.compare_with, args)
    report(columns, args.seconds)


if __name__ == "__main__":
    main()
