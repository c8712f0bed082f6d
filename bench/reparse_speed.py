"""CPU time of the Bench's re-parse (the proposal and 30 readings under what was said) at 30
words, plain and refined grammar, side by side in one run.

Data: the GUM trees (open data set: GUM, Zeldes 2017, CC BY; ../shared/data/gum-trees). Both
grammars train on the first 89 files (by name), the plain one with the service's defaults, the
refined one by ``--refine`` split-merge cycles (parser.latent.train_refined, 4 as the
service's most); the sentences are the first ``--sentences`` test sentences of 30 words from the
last 10 files. What is said: two gold constituents of the cleaned tree pinned and one gold tag
fixed, as after a few edits on the Bench; the tree re-parsed is the start's consensus.

Rows: the plain grammar; the refined grammar pruned coarse-to-fine through its base symbols
only (``one level``: as a grammar saved without its cycle hierarchy is parsed); the refined
grammar pruned through every level of its hierarchy (``levels``, the default).
Columns, median single-thread CPU ms over sentences x ``--repeats`` runs:
``parser.reparse.reparse`` with the 30 best derivations (what the Bench asks), with one reading
(the proposal alone), each as a sentence's *first* re-parse (the unconstrained best computed,
``free_best_logprob``'s cache emptied first) and as a *later* one (that best kept); then 30
distinct bracketings (``distinct=True``, drawn from ``DISTINCT_POOL`` x 30 derivations, later).

Usage: ``python bench/reparse_speed.py [--sentences N] [--repeats R] [--refine C]
[--cache DIR]`` (``--cache`` keeps the trained grammars between runs).
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

from parser.binarize import clean_tree  # noqa: E402
from parser.chart import parse  # noqa: E402
from parser.grammar import Grammar, train_grammar  # noqa: E402
from parser.latent import train_refined, without_hierarchy  # noqa: E402
from parser.reparse import DISTINCT_POOL, Said, free_best_logprob, reparse  # noqa: E402
from parser.trees import constituents, pos_tags, read_trees, words  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"
LENGTH = 30


def _grammar(path: Path | None, train) -> tuple[Grammar, float]:
    """The grammar and the CPU seconds its training took (0 when read from ``path``)."""
    if path is not None and path.exists():
        return Grammar.load(path), 0.0
    t0 = time.process_time()
    g = train()
    spent = time.process_time() - t0
    if path is not None:
        path.parent.mkdir(parents=True, exist_ok=True)
        g.save(path)
    return g, spent


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sentences", type=int, default=5)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--refine", type=int, default=4, help="split-merge cycles (default 4)")
    ap.add_argument("--cache", type=Path, help="directory keeping the trained grammars")
    args = ap.parse_args()
    files = sorted(GUM.glob("*.ptb"))
    if not files:
        sys.exit(f"no GUM trees at {GUM}")

    def read(f: Path) -> list:
        return read_trees(f.read_text(encoding="utf-8"), source=f.name)

    train = [t for f in files[:89] for t in read(f)]
    tests = [clean_tree(t) for f in files[89:] for t in read(f) if len(words(t)) == LENGTH]
    tests = tests[: args.sentences]
    cache = args.cache
    plain, plain_s = _grammar(
        cache / "plain-split.npz" if cache else None, lambda: train_grammar(train)
    )
    refined, refined_s = _grammar(
        cache / f"refined{args.refine}-split.npz" if cache else None,
        lambda: train_refined(train, args.refine),
    )
    print(
        f"{len(tests)} test sentences of {LENGTH} words; training CPU (0: cached) plain "
        f"{plain_s:.0f} s, refined ({args.refine} cycles) {refined_s:.0f} s"
    )
    numba.set_num_threads(1)
    print(
        "single thread, median CPU ms: k=30 first | k=30 later | k=1 first | k=1 later | "
        f"k=30 distinct (from {DISTINCT_POOL * 30} derivations), later"
    )
    kinds = (
        ({"k": 30}, True),
        ({"k": 30}, False),
        ({"k": 1}, True),
        ({"k": 1}, False),
        ({"k": 30, "distinct": True}, False),
    )
    rows = (("plain", plain), ("one level", without_hierarchy(refined)), ("levels", refined))
    for name, g in rows:
        parse(g, ["warm", "up", "."], k=2, posteriors=True)  # compile or load the numba cache
        cols: list[list[float]] = [[] for _ in kinds]
        for gold in tests:
            w = [str(x) for x in words(gold)]
            spans = [(s, e, lab) for lab, s, e in constituents(gold)[1:] if e - s > 1][:2]
            said = Said(required=tuple(spans), tags=((0, pos_tags(gold)[0]),))
            start = parse(g, w, posteriors=True).consensus
            for col, (kw, first) in zip(cols, kinds, strict=True):
                for _ in range(args.repeats):
                    if first:
                        g.__dict__.pop("_free_best", None)
                    else:
                        free_best_logprob(g, w)
                    t0 = time.process_time()
                    reparse(g, w, said, previous=start, **kw)
                    col.append(time.process_time() - t0)
        print(
            f"{name:10s} len {LENGTH}: "
            + " | ".join(f"{1000 * statistics.median(c):7.1f}" for c in cols),
            flush=True,
        )


if __name__ == "__main__":
    main()
