"""Accuracy and time of the refined grammar's coarse-to-fine settings, side by side in one run.

Usage: python bench/refined_pruning.py [--limit N] [--cycles C] [--split last|dev]
[--unpruned] [--cache DIR]

Open data set: GUM (Zeldes 2017), ../shared/data/gum-trees. The refined grammar
(parser.latent.train_refined, ``--cycles`` split-merge cycles, 4 by default) trains on the 89
files whose names sort first (``--split dev``: the first 79) and parses the first ``--limit``
sentences of at most 40 words of the last 10 files (``dev``: files 80 to 89) from words only,
with each setting of parser.chart.parse: pruned through the base symbols only (``one level``,
as a grammar saved without its cycle hierarchy) or through every level of the hierarchy
(``levels``), at several thresholds; ``--unpruned`` adds the complete refined chart (exact,
slow). Printed per setting: consensus and Viterbi labelled F1 (parser.scoring), the number of
sentences whose Viterbi tree differs from the first setting's, and the median and mean
single-thread CPU ms per sentence of the full suggestion (best, k = 10, posteriors, consensus).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

import numba  # noqa: E402
from learning_curve import SPLITS, gum_split  # noqa: E402  (bench/ is the script's folder)

from parser.chart import parse  # noqa: E402
from parser.grammar import Grammar  # noqa: E402
from parser.latent import n_levels, train_refined, without_hierarchy  # noqa: E402
from parser.scoring import score_corpus  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--limit", type=int, default=200)
    ap.add_argument("--cycles", type=int, default=4)
    ap.add_argument("--split", choices=sorted(SPLITS), default="last")
    ap.add_argument("--unpruned", action="store_true", help="also parse the complete chart")
    ap.add_argument("--cache", type=Path, help="directory keeping the trained grammar")
    args = ap.parse_args()
    train, gold = gum_split(args.split, args.limit)
    path = args.cache / f"refined{args.cycles}-{args.split}.npz" if args.cache else None
    if path is not None and path.exists():
        g = Grammar.load(path)
    else:
        g = train_refined(train, args.cycles)
        if path is not None:
            path.parent.mkdir(parents=True, exist_ok=True)
            g.save(path)
    numba.set_num_threads(1)
    flat = without_hierarchy(g)
    settings: list[tuple[str, Grammar, float | None]] = [
        ("one level 1e-4", flat, 1e-4),
        ("levels 1e-4", g, 1e-4),
        ("levels 1e-5", g, 1e-5),
        ("levels 1e-3", g, 1e-3),
    ]
    if args.unpruned:
        settings.append(("unpruned", g, None))
    print(
        f"split {args.split}: {len(gold)} test sentences (<= 40 words, words only); refined "
        f"{args.cycles} cycles, {n_levels(g)} coarser levels; single thread, CPU ms per "
        "sentence (best, k = 10, posteriors)",
        flush=True,
    )
    for _, grammar, prune in settings:
        parse(grammar, ["warm", "up", "."], k=2, posteriors=True, prune=prune)
    first: list[str] | None = None
    for name, grammar, prune in settings:
        results, spent = [], []
        for t in gold:
            t0 = time.process_time()
            results.append(parse(grammar, t.leaves(), k=10, posteriors=True, prune=prune))
            spent.append(time.process_time() - t0)
        best = [str(r.trees[0]) for r in results]
        first = first or best
        viterbi = score_corpus(zip(gold, [r.trees[0] for r in results], strict=True))
        cons = score_corpus(zip(gold, [r.consensus or r.trees[0] for r in results], strict=True))
        changed = sum(a != b for a, b in zip(first, best, strict=True))
        print(
            f"{name:16s} consensus {100 * cons.f1:6.2f}  Viterbi {100 * viterbi.f1:6.2f}  "
            f"Viterbi trees unlike the first row {changed:3d}  "
            f"CPU ms median {1000 * statistics.median(spent):6.1f} mean "
            f"{1000 * statistics.mean(spent):6.1f}",
            flush=True,
        )


if __name__ == "__main__":
    main()
