"""Pages at corpus sizes of 5,000 / 20,000 / 100,000 sentences: does a page cost one page?

Usage:
    python bench/scale.py [--sizes 5000,20000,100000] [--repeat 15] [--database-url URL]

For each size a fresh database (SQLite in a temporary folder, or a new database on the
PostgreSQL server ``--database-url`` names, dropped afterwards) is filled by the generator
below, then each request of the table is sent ``--repeat`` times in this process (FastAPI's
TestClient, no network) after two unmeasured warm-ups, and the median is printed, one column
per size, with the ratio of the largest size to the smallest. The Agreement page's first
view ever (every record summed, the sums stored) and its first view in a new process (the
process's sums forgotten: the stored sums read) are one request each, not a median.

The generator (deterministic, seed 17):

* words: every word of the GUM trees (``../shared/data/gum-trees``, Zeldes 2017, CC BY) in
  file order; raw sentences are runs of 5-40 of them (uniform length) drawn at random places,
  200 sentences per document, all in one corpus and all ``queued``;
* gold: every GUM tree as a gold sentence of its own document (state ``gold``, one Gold row),
  4,000-odd trees whatever the size;
* one annotator, ``reader``, is assigned every raw sentence (the Queue and Bench figures are
  theirs); twenty others, ``pair00``..``pair19``, have submitted annotations of the first
  ``size // 25`` raw sentences in pairs, with one agreement record per pair (200 / 800 /
  4,000), each record carrying per-label counts and confusions like real ones.

No parsing happens: the corpus has no grammar, so the figures are the pages' own cost.
"""

from __future__ import annotations

import argparse
import os
import random
import re
import shutil
import statistics
import sys
import tempfile
import time
import uuid
from collections.abc import Callable
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from fastapi.testclient import TestClient  # noqa: E402
from sqlalchemy import create_engine, insert, select, text  # noqa: E402
from sqlalchemy.orm import Session  # noqa: E402

from app.db import make_engine, make_sessionmaker, upgrade_to_head  # noqa: E402
from app.main import create_app  # noqa: E402
from app.models import (  # noqa: E402
    AgreementRecord,
    Annotation,
    Assignment,
    Corpus,
    Document,
    Gold,
    Revision,
    Sentence,
    User,
    reading_rank,
)
from app.security import hash_password  # noqa: E402
from app.services import agreement as agreement_service  # noqa: E402
from app.services import effort as effort_service  # noqa: E402
from app.settings import Settings  # noqa: E402
from parser.trees import read_trees, words, write_tree  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"
PASSWORD = "scale-pass-1234"
PER_DOCUMENT = 200
CHUNK = 5_000
SEED = 17
LABELS = ("NP", "VP", "PP", "S", "SBAR", "ADJP", "ADVP", "WHNP", "QP", "PRN")


def gum_trees() -> list[Any]:
    if not GUM.is_dir():
        sys.exit(f"the GUM trees are not at {GUM}")
    trees = []
    for path in sorted(GUM.glob("*.ptb")):
        trees.extend(read_trees(path.read_text(encoding="utf-8")))
    return trees


def _bulk(db: Session, model: type, rows: list[dict[str, Any]]) -> None:
    for at in range(0, len(rows), CHUNK):
        db.execute(insert(model), rows[at : at + CHUNK])


def build(settings: Settings, size: int, trees: list[Any]) -> dict[str, int]:
    """Fill the database (see the module docstring); returns ids the requests need."""
    upgrade_to_head(settings)
    engine = make_engine(settings)
    db = make_sessionmaker(engine)()
    rnd = random.Random(SEED)
    vocabulary = [w for t in trees for w in words(t)]
    password_hash = hash_password(PASSWORD)
    try:
        admin = User(username="scale-admin", role="admin", password_hash=password_hash)
        reader = User(username="reader", role="annotator", password_hash=password_hash)
        pairs = [
            User(username=f"pair{i:02d}", role="annotator", password_hash=password_hash)
            for i in range(20)
        ]
        corpus = Corpus(name=f"scale {size}", label_set=[], tag_set=[], settings={})
        db.add_all([admin, reader, *pairs, corpus])
        db.flush()
        n_docs = -(-size // PER_DOCUMENT)
        _bulk(
            db,
            Document,
            [
                {"corpus_id": corpus.id, "name": f"raw-{d:05d}", "position": d}
                for d in range(n_docs)
            ],
        )
        doc_ids = list(
            db.scalars(
                select(Document.id)
                .where(Document.corpus_id == corpus.id)
                .order_by(Document.position)
            )
        )
        rows = []
        for i in range(size):
            length = rnd.randint(5, 40)
            at = rnd.randrange(len(vocabulary) - length)
            toks = vocabulary[at : at + length]
            rows.append(
                {
                    "corpus_id": corpus.id,
                    "document_id": doc_ids[i // PER_DOCUMENT],
                    "position": i % PER_DOCUMENT,
                    "tokens": toks,
                    "text": " ".join(toks),
                    "state": "queued",
                }
            )
        _bulk(db, Sentence, rows)
        placed = db.execute(
            select(Sentence.id, Sentence.document_id, Sentence.position)
            .where(Sentence.corpus_id == corpus.id)
            .order_by(Sentence.document_id, Sentence.position)
        ).all()
        raw = [sid for sid, _, _ in placed]
        # as the assignment service stores them
        _bulk(
            db,
            Assignment,
            [
                {
                    "sentence_id": sid,
                    "user_id": reader.id,
                    "corpus_id": corpus.id,
                    "rank": reading_rank(doc, pos),
                }
                for sid, doc, pos in placed
            ],
        )
        # gold: one document per 200 GUM trees
        first_gold_doc = n_docs
        gold_docs = -(-len(trees) // PER_DOCUMENT)
        _bulk(
            db,
            Document,
            [
                {"corpus_id": corpus.id, "name": f"gold-{d:05d}", "position": first_gold_doc + d}
                for d in range(gold_docs)
            ],
        )
        gdoc_ids = list(
            db.scalars(
                select(Document.id)
                .where(Document.corpus_id == corpus.id, Document.position >= first_gold_doc)
                .order_by(Document.position)
            )
        )
        _bulk(
            db,
            Sentence,
            [
                {
                    "corpus_id": corpus.id,
                    "document_id": gdoc_ids[i // PER_DOCUMENT],
                    "position": i % PER_DOCUMENT,
                    "tokens": words(t),
                    "text": " ".join(words(t)),
                    "state": "gold",
                }
                for i, t in enumerate(trees)
            ],
        )
        gold_ids = list(
            db.scalars(
                select(Sentence.id)
                .where(Sentence.corpus_id == corpus.id, Sentence.state == "gold")
                .order_by(Sentence.id)
            )
        )
        _bulk(
            db,
            Gold,
            [
                {"sentence_id": sid, "tree": write_tree(t), "provenance": "import"}
                for sid, t in zip(gold_ids, trees, strict=True)
            ],
        )
        # agreement: pairs of submitted annotations with a record each
        n_pairs = size // 25
        for i, sid in enumerate(raw[:n_pairs]):
            a, b = pairs[(2 * i) % 20], pairs[(2 * i + 1) % 20]
            anns = [
                Annotation(sentence_id=sid, user_id=u.id, state="submitted", head=1) for u in (a, b)
            ]
            db.add_all(anns)
            db.flush()
            for ann in anns:
                db.add(
                    Revision(
                        annotation_id=ann.id,
                        number=1,
                        tree="(ROOT (X x))",
                        source="edit",
                        user_id=ann.user_id,
                    )
                )
            per_label = {
                lab: [rnd.randint(0, 3), rnd.randint(0, 4), rnd.randint(0, 4)]
                for lab in rnd.sample(LABELS, 5)
            }
            matched, ca, cb = rnd.randint(5, 12), rnd.randint(12, 15), rnd.randint(12, 15)
            f1 = 2 * matched / (ca + cb)
            db.add(
                AgreementRecord(
                    corpus_id=corpus.id,
                    sentence_id=sid,
                    annotation_a_id=anns[0].id,
                    annotation_b_id=anns[1].id,
                    user_a_id=a.id,
                    user_b_id=b.id,
                    matched=matched,
                    count_a=ca,
                    count_b=cb,
                    labelled_precision=matched / cb,
                    labelled_recall=matched / ca,
                    labelled_f1=f1,
                    unlabelled_f1=min(1.0, f1 + 0.1),
                    pos_agreement=0.95,
                    identical=False,
                    detail={
                        "per_label": per_label,
                        "unlabelled": [matched + 1, ca, cb],
                        "pos": [19, 20],
                        "confusions": [["NP", "QP", 1]],
                    },
                )
            )
        db.commit()
        return {"corpus": corpus.id, "first": raw[0], "last": raw[-1], "pairs": n_pairs}
    finally:
        db.close()
        engine.dispose()


def median_ms(fn: Callable[[], Any], repeat: int) -> tuple[float, float]:
    """Median wall and CPU milliseconds of ``fn`` after two unmeasured calls. The CPU time is
    the process's (the in-process server's threads and the client alike), which a loaded
    machine disturbs far less than the wall time."""
    for _ in range(2):
        fn()
    walls, cpus = [], []
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        walls.append((time.perf_counter() - t0) * 1000)
        cpus.append((time.process_time() - c0) * 1000)
    return statistics.median(walls), statistics.median(cpus)


def _once(fn: Callable[[], Any]) -> tuple[float, float]:
    """Wall and CPU milliseconds of one call of ``fn``."""
    t0, c0 = time.perf_counter(), time.process_time()
    fn()
    return (time.perf_counter() - t0) * 1000, (time.process_time() - c0) * 1000


def _get(client: TestClient, url: str) -> Callable[[], Any]:
    def go() -> Any:
        resp = client.get(url)
        if resp.status_code != 200:
            raise SystemExit(f"GET {url}: {resp.status_code} {resp.text[:200]}")
        return resp

    return go


def _last_link(html: str, fallback: str) -> str:
    """The page's own link to its last page (rel="last"), else ``fallback``."""
    found = re.search(r'href="([^"]+)"[^>]*rel="last"', html) or re.search(
        r'rel="last"[^>]*href="([^"]+)"', html
    )
    return found.group(1).replace("&amp;", "&") if found else fallback


def measure(
    settings: Settings, ids: dict[str, int], size: int, repeat: int
) -> dict[str, tuple[float, float]]:
    """(wall, CPU) milliseconds per request of the table (bytes for the ``bytes`` row)."""
    app = create_app(settings)
    out: dict[str, tuple[float, float]] = {}
    try:
        reader, admin = TestClient(app), TestClient(app)
        for client, name in ((reader, "reader"), (admin, "scale-admin")):
            resp = client.post(
                "/login", data={"username": name, "password": PASSWORD}, follow_redirects=False
            )
            if resp.status_code != 303:
                raise SystemExit(f"login {name}: {resp.status_code}")
        corpus = ids["corpus"]
        out["Queue page"] = median_ms(_get(reader, "/queue"), repeat)
        out["/api/queue"] = median_ms(_get(reader, "/api/queue"), repeat)
        size_bytes = float(len(reader.get("/api/queue").content))
        out["/api/queue bytes"] = (size_bytes, size_bytes)
        out["Bench page (last sentence)"] = median_ms(_get(reader, f"/bench/{ids['last']}"), repeat)
        out["/api/bench (last sentence)"] = median_ms(
            _get(reader, f"/api/bench/{ids['last']}"), repeat
        )
        first = admin.get(f"/corpora/{corpus}?state=queued").text
        last = _last_link(first, f"/corpora/{corpus}?state=queued&page={-(-size // 50)}")
        out["corpus page, queued, last page"] = median_ms(_get(admin, last), repeat)
        out["corpus page, first page"] = median_ms(_get(admin, f"/corpora/{corpus}"), repeat)
        out["Corpora overview"] = median_ms(_get(admin, "/"), repeat)
        agreement = _get(admin, f"/agreement?corpus={corpus}")
        # the first view ever sums every record (and stores the sums); a new process (this
        # one with its sums in memory forgotten) starts from the stored sums
        out["Agreement page, first view ever"] = _once(agreement)
        agreement_service.forget_kept_in_memory()
        effort_service.forget_cached_parts()
        out["Agreement page, first in a process"] = _once(agreement)
        out["Agreement page"] = median_ms(agreement, repeat)
        # the reader is assigned every compared sentence and has handed in none: the blind
        # rule hides all of them from the reader, whose view sums them apart
        out["Agreement page, blind reader"] = median_ms(
            _get(reader, f"/agreement?corpus={corpus}"), repeat
        )
        out["/api/corpora/{id}"] = median_ms(_get(admin, f"/api/corpora/{corpus}"), repeat)
        out["/api/health"] = median_ms(_get(reader, "/api/health"), repeat)
    finally:
        app.state.engine.dispose()
    return out


def fresh_settings(folder: Path, database_url: str | None) -> tuple[Settings, str | None]:
    if not database_url:
        return Settings(data_dir=folder, secret_key="scale-secret", training_in_process=True), None
    name = "tw_scale_" + uuid.uuid4().hex[:10]
    admin = create_engine(database_url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    admin.dispose()
    return Settings(
        data_dir=folder,
        database_url=f"{database_url.rsplit('/', 1)[0]}/{name}",
        secret_key="scale-secret",
        training_in_process=True,
    ), name


def drop(database_url: str, name: str) -> None:
    admin = create_engine(database_url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    admin.dispose()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", default="5000,20000,100000")
    ap.add_argument("--repeat", type=int, default=15)
    ap.add_argument("--database-url", default=None)
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    trees = gum_trees()
    columns: dict[int, dict[str, tuple[float, float]]] = {}
    for size in sizes:
        folder = Path(tempfile.mkdtemp(prefix="tw-scale-"))
        settings, pg_name = fresh_settings(folder / "data", args.database_url)
        try:
            t0 = time.perf_counter()
            ids = build(settings, size, trees)
            print(
                f"built {size:,} raw + {len(trees):,} gold sentences, {ids['pairs']:,} "
                f"agreement pairs in {time.perf_counter() - t0:.1f} s",
                flush=True,
            )
            columns[size] = measure(settings, ids, size, args.repeat)
        finally:
            if pg_name and args.database_url:
                drop(args.database_url, pg_name)
            shutil.rmtree(folder, ignore_errors=True)
    backend = "postgresql" if args.database_url else "sqlite"
    load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
    for which, what in ((0, "wall"), (1, "CPU")):
        print(
            f"\nmedian {what} ms of {args.repeat} requests, {backend}, in-process client, "
            f"load {load}"
        )
        head = f"{'request':<34}" + "".join(f"{s:>12,}" for s in sizes) + f"{'ratio':>8}"
        print(head)
        print("-" * len(head))
        for key in columns[sizes[0]]:
            if which and key.endswith("bytes"):
                continue
            cells = [columns[s][key][which] for s in sizes]
            fmt = "{:>12,.0f}" if key.endswith("bytes") else "{:>12.1f}"
            ratio = cells[-1] / cells[0] if cells[0] else float("nan")
            print(f"{key:<34}" + "".join(fmt.format(c) for c in cells) + f"{ratio:>8.2f}")


if __name__ == "__main__":
    main()
