"""Cold start: labelled F1 on a new domain from its first in-domain gold trees, side by side.

Usage: python bench/cold_start.py [--genres interview,voyage] [--test 120] [--draws 3]
                                  [--rows 0,100,300] [--columns plain,auto]
                                  [--extra "3;prior=200"] [--candidates 120] [--no-job]
                                  [--self-trees 400] [--self-tree consensus|viterbi]

Open data set: GUM (Zeldes 2017), ../shared/data/gum-trees. Each GUM genre named plays the new
domain in turn: its documents sorted by name, the last four are the test set (whole
documents, sentences of at most 40 words, parsed from words only; ``--test`` of them spread
evenly over the four documents), the others the in-domain pool; the other genres are the
reference trees. The in-domain trees therefore never come from a test document. Labelled
bracket F1 by parser.scoring (its defaults) of the consensus tree, the tree annotators start
from.

Draws: the in-domain trees of a row are the first N trees of the pool with its documents in
a random order (one order per draw, seeded), whole documents first as a team would annotate
them. Each cell is the mean over ``--draws`` draws with the standard deviation over the
draws beside it; the reference-alone row has no draw. Measured with 120 test sentences, two
draws of the same number of in-domain trees differ by about a point of F1, so a difference
smaller than the spread is noise.

Columns (``--columns``, any of):
  only         the N in-domain trees alone, no reference;
  plain        reference + the N trees, plain counts;
  auto         reference + the N trees, the weighting chosen as the service does
               (parser.adapt: every 10th in-domain tree held out, a grid scored on them once
               there are 20, the default before; the final grammar on all N);
  informative  the same as auto, with the N trees picked most informative first: at each row
               the pool is ranked by the previous row's grammar (tree entropy per word, Hwa
               2004) and the most uncertain trees are added, as the service's queue does. Only
               ``--candidates`` randomly drawn (seeded) unpicked pool sentences are ranked per
               row, to keep the run short.
  self         self-training (McClosky, Charniak and Johnson 2006, "Reranking and
               self-training for parser adaptation", from memory): the auto grammar parses
               ``--self-trees`` raw in-domain sentences (the pool's sentences after the N
               trees, at most 40 words, words only), and their trees (``--self-tree``:
               consensus or viterbi) are added to the reference trees (plain counts) of a
               grammar trained again with the auto weighting.
A row of N at least the pool's size uses the whole pool (one draw: every draw is the same).
``--extra`` adds one column per fixed weighting (parser.adapt.parse_weighting text, separated
by ``;``), counted with plain counts in one pass.
After the first genre's table, the service's training job (app.services.training, run on a
fresh SQLite database in this process, its held-out parses in worker processes as in the
service) with every other genre as one reference set + 300 in-domain gold trees and the
weight chosen automatically: CPU seconds of the job and of its parse workers, wall seconds,
the grid's scores (the machine's load shows beside them).
"""

from __future__ import annotations

import argparse
import os
import random
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from nltk import Tree  # noqa: E402

from parser.adapt import (  # noqa: E402
    choose_weighting,
    describe,
    heldout_f1,
    heldout_split,
    parse_weighting,
)
from parser.binarize import clean_tree  # noqa: E402
from parser.chart import tree_entropy  # noqa: E402
from parser.grammar import Grammar, Weighting, train_grammar, train_weighted  # noqa: E402
from parser.trees import read_trees  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"
COLUMNS = ("only", "plain", "auto", "informative", "self")


def _rooted(tree: Tree) -> Tree:
    if tree.label() == "ROOT":
        return tree
    if tree.label() in ("", "TOP"):
        return Tree("ROOT", list(tree))
    return Tree("ROOT", [tree])


def _read(path: Path) -> list[Tree]:
    return [_rooted(t) for t in read_trees(path.read_text(encoding="utf-8"), source=str(path))]


def _load() -> str:
    return "load " + " ".join(f"{x:.1f}" for x in os.getloadavg())


def _auto(
    trees: list[Tree], reference: list[Tree], plain: Grammar | None = None
) -> tuple[Grammar, Weighting]:
    """The grammar the service would train, and its weighting; ``plain`` (already trained
    with plain counts on the same trees) is reused when the choice is plain counts."""
    train, held = heldout_split(trees)
    choice = choose_weighting(train, held, reference)
    if plain is not None and choice.weighting == Weighting():
        return plain, choice.weighting
    return train_grammar(trees, reference=reference, weighting=choice.weighting), choice.weighting


def _informative(
    pool: list[Tree],
    picked: set[int],
    grammar: Grammar,
    want: int,
    candidates: int,
    rng: random.Random,
) -> list[int]:
    """Indexes of the ``want`` most uncertain unpicked pool trees (of a random draw)."""
    left = [i for i in range(len(pool)) if i not in picked]
    draw = rng.sample(left, min(candidates, len(left)))
    scored = []
    for i in draw:
        words = pool[i].leaves()
        h = tree_entropy(grammar, words)
        scored.append((-(h / len(words)) if h == h else 0.0, i))
    scored.sort()
    return [i for _, i in scored[:want]]


def _self_trees(grammar: Grammar, sentences: list[list[str]], kind: str) -> list[Tree]:
    """The grammar's trees of raw sentences (consensus or Viterbi), ROOT-rooted."""
    from parser.chart import parse

    out = []
    for words in sentences:
        result = parse(grammar, words, posteriors=kind == "consensus")
        if result.fallback:
            continue
        out.append(_rooted(result.consensus if kind == "consensus" else result.trees[0]))
    return out


def _cell(values: list[float]) -> str:
    if not values:
        return "-"
    if len(values) == 1:
        return f"{values[0]:.2f}"
    return f"{statistics.mean(values):.2f} ± {statistics.stdev(values):.2f}"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--genres", default="interview,voyage")
    ap.add_argument("--test", type=int, default=120)
    ap.add_argument("--draws", type=int, default=3)
    ap.add_argument("--rows", default="0,100,300")
    ap.add_argument("--columns", default="plain,auto")
    ap.add_argument("--extra", default="", help="fixed weightings to compare, ';'-separated")
    ap.add_argument("--candidates", type=int, default=120)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--self-trees", type=int, default=400)
    ap.add_argument("--self-tree", choices=("consensus", "viterbi"), default="consensus")
    ap.add_argument("--no-table", action="store_true", help="only the job's time")
    ap.add_argument("--no-job", action="store_true", help="only the table")
    args = ap.parse_args()
    rows = [int(x) for x in args.rows.split(",")]
    columns = [c for c in args.columns.split(",") if c]
    bad = [c for c in columns if c not in COLUMNS]
    if bad:
        sys.exit(f"unknown column(s) {', '.join(bad)}; choose from {', '.join(COLUMNS)}")
    extras = [parse_weighting(x) for x in args.extra.split(";") if x.strip()]
    files = sorted(GUM.glob("*.ptb"))
    print(f"cold start, consensus F1, words only; {_load()}", flush=True)
    for genre in args.genres.split(","):
        mine = [f for f in files if f.name.startswith(f"GUM_{genre}_")]
        if len(mine) < 6:
            sys.exit(f"expected the shared GUM trees of genre {genre!r} at {GUM}")
        reference = [t for f in files if f not in mine for t in _read(f)]
        docs = [_read(f) for f in mine[:-4]]
        every = [c for f in mine[-4:] for t in _read(f) if len((c := clean_tree(t)).leaves()) <= 40]
        test = every[:: max(1, len(every) // args.test)][: args.test]
        print(
            f"\ngenre {genre}: reference {len(reference)} trees (other genres), in-domain pool "
            f"{sum(map(len, docs))} trees in {len(docs)} documents, test {len(test)} of the "
            f"{len(every)} sentences of <= 40 words of the last 4 documents; {args.draws} "
            f"draw(s) of the in-domain trees; {_load()}",
            flush=True,
        )
        if not args.no_table:
            _table(args, rows, columns, extras, reference, docs, test)
        if not args.no_job and genre == args.genres.split(",")[0]:
            _job(reference, [t for d in docs for t in d])


def _table(
    args: argparse.Namespace,
    rows: list[int],
    columns: list[str],
    extras: list[Weighting],
    reference: list[Tree],
    docs: list[list[Tree]],
    test: list[Tree],
) -> None:
    def f1(g: Grammar) -> float:
        return 100 * heldout_f1(g, test)

    names = columns + [describe(w) for w in extras]
    print(f"{'trees':>5}  " + "  ".join(f"{n:>16}" for n in names) + "  weights", flush=True)
    # results[(column, n)] = one value per draw
    results: dict[tuple[str, int], list[float]] = {}
    chosen: dict[int, list[str]] = {}
    base_grammar: Grammar | None = None
    if 0 in rows or "informative" in columns:
        t0 = time.process_time()
        base_grammar = train_grammar([], reference=reference)
        base = f1(base_grammar)
        cells = [f"{base:>16.2f}" if n != "only" else f"{'-':>16}" for n in names]
        print(
            f"{0:>5}  "
            + "  ".join(cells)
            + f"  reference alone ({time.process_time() - t0:.0f} s CPU, {_load()})",
            flush=True,
        )
        for n in names:
            results[(n, 0)] = [base]
    pools = []
    for d in range(args.draws):
        order = list(docs)
        random.Random(args.seed * 1000 + d).shuffle(order)
        pools.append([t for doc in order for t in doc])
    informative_state = [
        ([], base_grammar, random.Random(args.seed * 1000 + d)) for d in range(args.draws)
    ]
    for n in rows:
        if n == 0:
            continue
        t0 = time.process_time()
        for d, pool in enumerate(pools):
            if n >= len(pool) and d > 0:
                break  # the whole pool: the same trees in every draw
            trees = pool[:n]
            if "only" in columns:
                results.setdefault(("only", n), []).append(f1(train_grammar(trees)))
            fixed = [Weighting()] + extras
            grammars = train_weighted(trees, reference=reference, weightings=fixed)
            if "plain" in columns:
                results.setdefault(("plain", n), []).append(f1(grammars[0]))
            for w, g in zip(extras, grammars[1:], strict=True):
                results.setdefault((describe(w), n), []).append(f1(g))
            if "auto" in columns or "self" in columns:
                g_auto, w_auto = _auto(trees, reference, grammars[0])
                chosen.setdefault(n, []).append(describe(w_auto))
            if "auto" in columns:
                same = g_auto is grammars[0] and "plain" in columns
                value = results[("plain", n)][-1] if same else f1(g_auto)
                results.setdefault(("auto", n), []).append(value)
            if "self" in columns:
                raw = [t.leaves() for t in pool[n:] if len(t.leaves()) <= 40]
                parsed = _self_trees(g_auto, raw[: args.self_trees], args.self_tree)
                g_self = train_grammar(trees, reference=reference + parsed, weighting=w_auto)
                results.setdefault(("self", n), []).append(f1(g_self))
            if "informative" in columns and n < len(pool):
                picked, prev, rng = informative_state[d]
                assert prev is not None
                need = n - len(picked)
                picked += _informative(
                    pool, set(picked), prev, need, max(args.candidates, need), rng
                )
                g_inf, _ = _auto([pool[i] for i in picked], reference)
                informative_state[d] = (picked, g_inf, rng)
                results.setdefault(("informative", n), []).append(f1(g_inf))
        print(
            f"{n:>5}  "
            + "  ".join(f"{_cell(results.get((c, n), [])):>16}" for c in names)
            + f"  auto: {', '.join(chosen.get(n, [])) or '-'} "
            f"({time.process_time() - t0:.0f} s CPU, {_load()})",
            flush=True,
        )
    if (names[0], 0) in results:
        base = results[(names[0], 0)][0]
        for c in names:
            if c == "only":
                continue
            gains = [
                f"{n}: {statistics.mean(results[(c, n)]) - base:+.2f}"
                for n in rows
                if n and (c, n) in results
            ]
            print(f"gain over the reference alone, {c}: " + ", ".join(gains), flush=True)


def _flat(tree: Tree) -> str:
    return " ".join(str(tree).split())


def _job(reference: list[Tree], pool: list[Tree]) -> None:
    """The service's training job (app.services.training.run_version, the code a background
    worker runs) on a fresh SQLite database: a corpus with the other genres as one reference
    set, 300 in-domain gold trees and the weight chosen automatically. CPU time is this
    process's and its parse workers' (joined before the job ends)."""
    import resource
    import tempfile

    from app.main import create_app
    from app.models import GrammarVersion
    from app.services import training
    from app.services.corpora import create_corpus
    from app.services.imports import import_bytes
    from app.services.reference import add_reference
    from app.settings import Settings

    trees = pool[:300]
    with tempfile.TemporaryDirectory(prefix="tw-cold-") as tmp:
        settings = Settings(data_dir=Path(tmp), secret_key="bench", training_in_process=True)
        app = create_app(settings)
        factory = app.state.sessionmaker
        with factory() as db:
            corpus = create_corpus(db, "cold", settings={"retrain_every": 0})
            db.commit()
            corpus_id = corpus.id
            text = "".join(_flat(t) + "\n" for t in trees).encode()
            import_bytes(db, text, source="pool.ptb", corpus_name="cold", kind="gold")
            ref = "".join(_flat(t) + "\n" for t in reference).encode()
            add_reference(
                db,
                corpus_id,
                ref,
                name="other genres",
                source="GUM",
                licence="CC BY",
                filename="reference.ptb",
            )
            version_id = training.request_training(db, corpus_id, reason="bench").id
        assert training.claim(factory, version_id) == version_id
        children = resource.getrusage(resource.RUSAGE_CHILDREN)
        c0, w0 = time.process_time(), time.perf_counter()
        training.run_version(factory, version_id)
        c1, w1 = time.process_time(), time.perf_counter()
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        child = (after.ru_utime + after.ru_stime) - (children.ru_utime + children.ru_stime)
        with factory() as db:
            row = db.get(GrammarVersion, version_id)
            assert row is not None
            opts = row.options or {}
            adaptation = opts.get("adaptation", {})
            grid = ", ".join(
                f"{x['weighting']} {100 * x['f1']:.2f}" for x in adaptation.get("grid", [])
            )
            print(
                f"service job with {len(reference)} reference + {len(trees)} in-domain trees "
                f"({opts.get('heldout_sampled')} held out): {c1 - c0 + child:.1f} s CPU "
                f"({c1 - c0:.1f} in the job's process, {child:.1f} in its parse workers), "
                f"{w1 - w0:.1f} s wall; status {row.status}; weighting "
                f"{adaptation.get('weighting')} (grid: {grid or '-'}); timing "
                + ", ".join(f"{k} {v:.1f} s" for k, v in opts.get("timing", {}).items())
                + f"; {_load()}",
                flush=True,
            )
        app.state.engine.dispose()


if __name__ == "__main__":
    main()
