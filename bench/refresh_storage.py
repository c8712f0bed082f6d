"""The gold loop's cost per retraining, eager against lazy, and the database it leaves behind.

Usage:
    python bench/refresh_storage.py [--sizes 1000,5000] [--retrainings 10] [--annotators 20]
                                    [--train-trees 1500] [--sample 24] [--heldout 60]
                                    [--heldout-sample 30]

One grammar is trained on the first ``--train-trees`` GUM trees (``../shared/data/gum-trees``,
Zeldes 2017, CC BY). Raw sentences are drawn as in bench/scale.py (runs of 5-40 GUM words,
seed 17); ``--sample`` of them are parsed completely (k = 5 with posteriors, one thread) to
measure the CPU time of one suggestion and to give realistic Suggestion rows.

For each size, two fresh SQLite databases go through ``--retrainings`` retrainings. Each
sentence is in the queues of two of ``--annotators`` annotators, 25 new gold trees arrive
between two retrainings (the 25 first open sentences of the corpus become gold) and the corpus
retrains every 25 gold trees:

* **before** (the former code): every version keeps its grammar as an undeflated ``.npz``
  (the former ``Grammar.save``) and every open sentence gets a suggestion of every version,
  none deleted (the former eager refresh, ``suggestions.refresh_unstarted``);
* **after** (this code): deflated grammars, ``keep_grammars`` 5, older suggestions pruned
  (``suggestions.prune``) and only the bounded look-ahead refreshed
  (``app.services.refresh``: ``refresh_lookahead`` 10 x annotators, at most 25 x 2).

Rows are written with the sampled parses' values, not parsed again, so the run takes minutes;
the parse counts are exact and their CPU time is the count times the measured mean. The
databases are vacuumed before their size is read. No sentence is started in either mode, so
no suggestion is kept for a started sentence (the same in both).

Finally one real :func:`app.services.refresh.refresh_step` runs on the largest "after"
database (wall and CPU time, the worker processes' included), and the held-out scoring is
timed both ways: ``--heldout`` held-out GUM trees parsed one by one in this process (former)
against a ``--heldout-sample`` random sample parsed by ``parser.batch.parse_many`` over the
parse admission's workers (now). The service's defaults are all held-out gold (406 at 4,063
gold trees) against a sample of 200.
"""

from __future__ import annotations

import argparse
import io
import os
import random
import shutil
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from scale import _bulk, gum_trees  # noqa: E402
from sqlalchemy import select, text, update  # noqa: E402

from app.db import make_engine, make_sessionmaker, upgrade_to_head  # noqa: E402
from app.models import (  # noqa: E402
    Assignment,
    Corpus,
    Document,
    GrammarVersion,
    Sentence,
    Suggestion,
    User,
    reading_rank,
)
from app.services import refresh, suggestions  # noqa: E402
from app.services.admission import parallel_parses  # noqa: E402
from app.services.training import grammar_bytes, rooted  # noqa: E402
from app.settings import Settings  # noqa: E402
from parser.batch import parse_many  # noqa: E402
from parser.chart import parse  # noqa: E402
from parser.grammar import Grammar, train_grammar  # noqa: E402
from parser.trees import words  # noqa: E402

SEED = 17
GOLD_PER_RETRAINING = 25
PER_SENTENCE = 2


def undeflated(data: bytes) -> bytes:
    """The same grammar arrays written without deflating (the former Grammar.save)."""
    with np.load(io.BytesIO(data)) as npz:
        arrays = {k: npz[k] for k in npz.files}
    out = io.BytesIO()
    np.savez(out, **arrays)  # type: ignore[arg-type]
    return out.getvalue()


def raw_sentences(trees: list[Any], size: int) -> list[list[str]]:
    rnd = random.Random(SEED)
    vocabulary = [w for t in trees for w in words(t)]
    out = []
    for _ in range(size):
        length = rnd.randint(5, 40)
        at = rnd.randrange(len(vocabulary) - length)
        out.append(vocabulary[at : at + length])
    return out


def cpu() -> float:
    t = os.times()
    return t.user + t.system + t.children_user + t.children_system


def build(folder: Path, sents: list[list[str]], annotators: int) -> tuple[Any, int]:
    """A fresh database with one corpus of ``sents``, each in two annotators' queues."""
    settings = Settings(database_url=f"sqlite:///{folder / 'tw.db'}", data_dir=folder)
    upgrade_to_head(settings)
    engine = make_engine(settings)
    factory = make_sessionmaker(engine)
    with factory() as db:
        users = [
            User(username=f"ann{i:02d}", role="annotator", password_hash="-")
            for i in range(annotators)
        ]
        corpus = Corpus(
            name="refresh",
            label_set=[],
            tag_set=[],
            settings={
                "retrain_every": GOLD_PER_RETRAINING,
                "retrain_every_early": 0,
                "annotators_per_sentence": PER_SENTENCE,
                "keep_grammars": 5,
                "refresh_lookahead": 10,
            },
        )
        db.add_all([*users, corpus])
        db.flush()
        n_docs = -(-len(sents) // 200)
        _bulk(
            db,
            Document,
            [{"corpus_id": corpus.id, "name": f"raw-{d}", "position": d} for d in range(n_docs)],
        )
        docs = list(db.scalars(select(Document.id).order_by(Document.position)))
        _bulk(
            db,
            Sentence,
            [
                {
                    "corpus_id": corpus.id,
                    "document_id": docs[i // 200],
                    "position": i % 200,
                    "tokens": toks,
                    "text": " ".join(toks),
                    "state": "queued",
                }
                for i, toks in enumerate(sents)
            ],
        )
        placed = db.execute(
            select(Sentence.id, Sentence.document_id, Sentence.position).order_by(Sentence.id)
        ).all()
        doc_place = {d: p for p, d in enumerate(docs)}
        rows = []
        for n, (sid, doc, pos) in enumerate(placed):
            for j in range(PER_SENTENCE):
                user = users[(n * PER_SENTENCE + j) % annotators]
                rows.append(
                    {
                        "sentence_id": sid,
                        "user_id": user.id,
                        "corpus_id": corpus.id,
                        "rank": reading_rank(doc_place[doc], pos),
                    }
                )
        _bulk(db, Assignment, rows)
        db.commit()
        return factory, corpus.id


def _rows(ids: list[int], version_id: int, values: list[dict[str, Any]]) -> list[dict[str, Any]]:
    return [
        {"sentence_id": sid, "grammar_version_id": version_id, **values[n % len(values)]}
        for n, sid in enumerate(ids)
    ]


def retrain_many(
    factory: Any, corpus_id: int, mode: str, blob: bytes, retrainings: int, values: list[Any]
) -> list[int]:
    """Run the retrainings of the module docstring; the parses each one asks for."""
    work = []
    with factory() as db:
        for number in range(1, retrainings + 1):
            corpus = db.get(Corpus, corpus_id)
            assert corpus is not None
            version = GrammarVersion(
                corpus_id=corpus_id, number=number, status="ready", data=blob, training_size=0
            )
            db.add(version)
            db.flush()
            corpus.active_grammar_id = version.id
            db.commit()
            if mode == "before":
                ids = list(
                    db.scalars(
                        select(Sentence.id).where(
                            Sentence.corpus_id == corpus_id,
                            Sentence.state.in_(refresh.OPEN_STATES),
                        )
                    )
                )
            else:
                suggestions.prune(db, corpus, corpus.options.keep_grammars)
                db.commit()
                users = refresh.annotators_with_open_work(db, corpus_id)
                budget = refresh.refresh_budget(db, corpus, annotators=len(users))
                ahead = refresh.lookahead(db, corpus, users, corpus.options.refresh_lookahead)
                ids = ahead[:budget]
            _bulk(db, Suggestion, _rows(ids, version.id, values))
            work.append(len(ids))
            # the team's next 25 gold trees
            done = list(
                db.scalars(
                    select(Sentence.id)
                    .where(Sentence.corpus_id == corpus_id, Sentence.state == "queued")
                    .order_by(Sentence.id)
                    .limit(GOLD_PER_RETRAINING)
                )
            )
            db.execute(update(Sentence).where(Sentence.id.in_(done)).values(state="gold"))
            db.commit()
        db.execute(text("VACUUM"))
    return work


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sizes", default="1000,5000")
    ap.add_argument("--retrainings", type=int, default=10)
    ap.add_argument("--annotators", type=int, default=20)
    ap.add_argument("--train-trees", type=int, default=1500)
    ap.add_argument("--sample", type=int, default=24)
    ap.add_argument("--heldout", type=int, default=60)
    ap.add_argument("--heldout-sample", type=int, default=30)
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    import numba

    numba.set_num_threads(1)
    trees = gum_trees()
    grammar: Grammar = train_grammar([rooted(t) for t in trees[: args.train_trees]])
    after_blob = grammar_bytes(grammar)
    before_blob = undeflated(after_blob)
    print(
        f"grammar: {args.train_trees} GUM trees, {len(grammar.symbols)} symbols; saved "
        f"{len(before_blob) / 1e6:.1f} MB undeflated (before), {len(after_blob) / 1e6:.1f} MB "
        "deflated (after)"
    )
    sample = raw_sentences(trees, max(sizes))[: args.sample]
    parse(grammar, ["a", "b"])
    c0 = time.process_time()
    values = [
        suggestions.suggestion_values(parse(grammar, w, k=5, posteriors=True)) for w in sample
    ]
    per_parse = (time.process_time() - c0) / len(sample)
    print(f"one complete suggestion: {per_parse:.2f} s CPU (mean of {len(sample)} sentences)")

    print(f"\n{args.retrainings} retrainings, {args.annotators} annotators, 25 gold each time")
    head = f"{'':<44}" + "".join(f"{s:>14,}" for s in sizes)
    print(head)
    table: dict[str, list[str]] = {}
    last: tuple[Any, int] | None = None
    folders: list[Path] = []
    for size in sizes:
        sents = raw_sentences(trees, size)
        for mode, blob in (("before", before_blob), ("after", after_blob)):
            folder = Path(tempfile.mkdtemp(prefix="tw-refresh-"))
            folders.append(folder)
            factory, corpus_id = build(folder, sents, args.annotators)
            work = retrain_many(factory, corpus_id, mode, blob, args.retrainings, values)
            size_mb = (folder / "tw.db").stat().st_size / 1e6
            mean_work = sum(work) / len(work)
            table.setdefault(f"parses per retraining, {mode}", []).append(f"{mean_work:,.0f}")
            table.setdefault(f"CPU s per retraining, {mode}", []).append(
                f"{mean_work * per_parse:,.0f}"
            )
            table.setdefault(f"database MB per 1,000 sentences, {mode}", []).append(
                f"{size_mb * 1000 / size:.1f}"
            )
            if mode == "after":
                last = (factory, corpus_id)
    for what in ("parses per retraining", "CPU s per retraining", "database MB per 1,000"):
        for key in [k for k in table if k.startswith(what)]:
            print(f"{key:<44}" + "".join(f"{c:>14}" for c in table[key]))

    assert last is not None
    factory, corpus_id = last
    with factory() as db:
        corpus = db.get(Corpus, corpus_id)
        assert corpus is not None
        version = GrammarVersion(
            corpus_id=corpus_id, number=99, status="ready", data=after_blob, training_size=0
        )
        db.add(version)
        db.flush()
        corpus.active_grammar_id = version.id
        db.commit()
        w0, c0 = time.perf_counter(), cpu()
        report = refresh.refresh_step(db, corpus)
        wall, used = time.perf_counter() - w0, cpu() - c0
    print(
        f"\none real refresh_step ({max(sizes):,} sentences): {report.parsed} parsed of a budget "
        f"of {report.budget} in {wall:.1f} s wall, {used:.1f} s CPU with workers "
        f"({parallel_parses()} parallel parses); the eager refresh would parse every open "
        "sentence"
    )

    held = [words(t) for t in trees[args.train_trees :]][: args.heldout]
    picked = random.Random(SEED).sample(held, min(args.heldout_sample, len(held)))
    w0, c0 = time.perf_counter(), cpu()
    for w in held:
        parse(grammar, w, posteriors=True)
    serial_wall, serial_cpu = time.perf_counter() - w0, cpu() - c0
    w0, c0 = time.perf_counter(), cpu()
    workers = parallel_parses()
    parse_many(
        grammar,
        picked,
        posteriors=True,
        processes=workers,
        chunk=max(1, len(picked) // 4),
        threads=1,
    )
    par_wall, par_cpu = time.perf_counter() - w0, cpu() - c0
    print(
        f"held-out scoring: all {len(held)} one by one {serial_wall:.1f} s wall "
        f"({serial_cpu:.1f} s CPU); a sample of {len(picked)} on {workers} workers "
        f"{par_wall:.1f} s wall ({par_cpu:.1f} s CPU); wall ratio {serial_wall / par_wall:.2f}"
    )
    for folder in folders:  # the databases (hundreds of MB before) are not kept
        shutil.rmtree(folder, ignore_errors=True)
    print(f"load: {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} {os.getloadavg()[2]:.2f}")


if __name__ == "__main__":
    main()
