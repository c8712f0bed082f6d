"""Cold start: labelled F1 on a new domain from its first in-domain gold trees, side by side.

Usage: python bench/cold_start.py [--genre interview] [--test 60] [--candidates 120]
                                  [--rows 0,25,50,100,200,300] [--no-table] [--no-job]

Open data set: GUM (Zeldes 2017), ../shared/data/gum-trees. One GUM genre plays the new
domain: its documents sorted by name, the last four are the test set (whole documents,
sentences of at most 40 words, parsed from words only; every second sentence, at most
``--test`` of them: a subsample, to keep the run short on a shared machine), the others the
in-domain pool; the other genres are the reference trees. Labelled bracket F1 by
parser.scoring (its defaults) of the consensus tree, the tree annotators start from.

Rows: in-domain gold trees used. Columns:
  in-domain only      the first N pool trees in document order, no reference;
  ref+in plain        reference + the same N trees, plain counts;
  ref+in auto         reference + the same N trees, the weighting chosen as the service does
                      (parser.adapt: every 10th in-domain tree held out, a grid scored on them
                      once there are 20, the default before; the final grammar on all N);
  auto, informative   the same, with the N trees picked most informative first: at each row the
                      pool is ranked by the previous row's grammar (tree entropy per word,
                      Hwa 2004) and the most uncertain trees are added, as the service's queue
                      does. Only ``--candidates`` randomly drawn (seeded) unpicked pool
                      sentences are ranked per row, to keep the run short.
Then the weight chosen per row and, last, the time to train with every other genre as
reference + 300 in-domain trees and the auto grid (CPU seconds and wall seconds; the machine's
load shows beside them).
"""

from __future__ import annotations

import argparse
import os
import random
import sys
import time
from collections.abc import Callable
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from nltk import Tree  # noqa: E402

from parser.adapt import choose_weighting, describe, heldout_f1, heldout_split  # noqa: E402
from parser.binarize import clean_tree  # noqa: E402
from parser.chart import tree_entropy  # noqa: E402
from parser.grammar import Grammar, Weighting, train_grammar  # noqa: E402
from parser.trees import read_trees  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"


def _rooted(tree: Tree) -> Tree:
    if tree.label() == "ROOT":
        return tree
    if tree.label() in ("", "TOP"):
        return Tree("ROOT", list(tree))
    return Tree("ROOT", [tree])


def _read(path: Path) -> list[Tree]:
    return [_rooted(t) for t in read_trees(path.read_text(encoding="utf-8"), source=str(path))]


def _auto(
    trees: list[Tree], reference: list[Tree], plain: Grammar | None = None
) -> tuple[Grammar, Weighting]:
    """The grammar the service would train; ``plain`` (already trained with plain counts on
    the same trees) is reused when the choice is plain counts."""
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


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--genre", default="interview")
    ap.add_argument("--test", type=int, default=60)
    ap.add_argument("--candidates", type=int, default=120)
    ap.add_argument("--rows", default="0,25,50,100,200,300")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--no-table", action="store_true", help="only the job's time")
    ap.add_argument("--no-job", action="store_true", help="only the table")
    ap.add_argument(
        "--no-informative",
        action="store_true",
        help="leave out the most-informative-first column (its rows depend on "
        "each other; the others can run row by row in separate processes)",
    )
    args = ap.parse_args()
    rows = [int(x) for x in args.rows.split(",")]
    files = sorted(GUM.glob("*.ptb"))
    mine = [f for f in files if f.name.startswith(f"GUM_{args.genre}_")]
    if len(mine) < 6:
        sys.exit(f"expected the shared GUM trees of genre {args.genre!r} at {GUM}")
    reference = [t for f in files if f not in mine for t in _read(f)]
    pool = [t for f in mine[:-4] for t in _read(f)]
    test = [c for f in mine[-4:] for t in _read(f) if len((c := clean_tree(t)).leaves()) <= 40][
        ::2
    ][: args.test]
    print(
        f"genre {args.genre}: reference {len(reference)} trees (other genres), in-domain pool "
        f"{len(pool)}, test {len(test)} sentences (every second of <= 40 words, last 4 "
        f"documents); load {os.getloadavg()[0]:.1f}",
        flush=True,
    )
    rng = random.Random(args.seed)

    def f1(g: Grammar) -> float:
        return 100 * heldout_f1(g, test)

    if not args.no_table:
        _table(args, rows, reference, pool, test, rng, f1)
    if not args.no_job:
        _job(reference, pool)


def _table(
    args: argparse.Namespace,
    rows: list[int],
    reference: list[Tree],
    pool: list[Tree],
    test: list[Tree],
    rng: random.Random,
    f1: Callable[[Grammar], float],
) -> None:
    print(
        f"{'trees':>5}  {'in-domain only':>14}  {'ref+in plain':>12}  {'ref+in auto':>11}  "
        f"{'auto, informative':>17}  weights (doc order / informative)",
        flush=True,
    )
    picked: list[int] = []
    prev: Grammar | None = None
    for n in rows:
        t0 = time.process_time()
        if n == 0:
            g = train_grammar([], reference=reference)
            base = f1(g)
            prev = g
            print(
                f"{0:>5}  {'-':>14}  {base:>12.2f}  {base:>11.2f}  {base:>17.2f}  "
                f"reference only  ({time.process_time() - t0:.0f} s CPU)",
                flush=True,
            )
            continue
        doc = pool[:n]
        only = f1(train_grammar(doc)) if n <= 200 else float("nan")
        g_plain = train_grammar(doc, reference=reference)
        plain = f1(g_plain)
        g_auto, w_auto = _auto(doc, reference, g_plain)
        auto = plain if g_auto is g_plain else f1(g_auto)
        inf, w_inf = float("nan"), "-"
        if not args.no_informative:
            assert prev is not None
            need = n - len(picked)
            picked += _informative(pool, set(picked), prev, need, max(args.candidates, need), rng)
            g_inf, weighting = _auto([pool[i] for i in picked], reference)
            prev, inf, w_inf = g_inf, f1(g_inf), describe(weighting)
        print(
            f"{n:>5}  {only:>14.2f}  {plain:>12.2f}  {auto:>11.2f}  {inf:>17.2f}  "
            f"{describe(w_auto)} / {w_inf}  ({time.process_time() - t0:.0f} s CPU)",
            flush=True,
        )


def _job(reference: list[Tree], pool: list[Tree]) -> None:
    """The service's job with all other genres as reference and 300 in-domain trees."""
    trees = pool[:300]
    c0, w0 = time.process_time(), time.perf_counter()
    train, held = heldout_split(trees)
    choice = choose_weighting(train, held, reference)
    c1, w1 = time.process_time(), time.perf_counter()
    train_grammar(trees, reference=reference, weighting=choice.weighting)
    c2, w2 = time.process_time(), time.perf_counter()
    print(
        f"job with {len(reference)} reference + {len(trees)} in-domain trees: weight choice "
        f"(grid of 5 on {len(held)} held-out) {c1 - c0:.1f} s CPU / {w1 - w0:.1f} s wall, "
        f"final grammar {c2 - c1:.1f} s CPU / {w2 - w1:.1f} s wall; load "
        f"{os.getloadavg()[0]:.1f}",
        flush=True,
    )


if __name__ == "__main__":
    main()
