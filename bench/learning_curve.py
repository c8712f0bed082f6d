"""Learning curve of the plain and the refined grammar: labelled F1 against the number of
training trees, side by side in one run, the same test sentences for every row.

Usage: python bench/learning_curve.py [--fractions 0.25 0.5 1] [--split last|dev]
[--limit N] [--cycles C]

Open data set: GUM (Zeldes 2017), ../shared/data/gum-trees. ``--split last`` (default) trains
on the 89 files whose names sort first and tests on the last 10; ``--split dev`` trains on the
first 79 and tests on files 80 to 89 (the development split: the test files untouched). Each
row trains on the first fraction of the training *files* (whole files, in name order), the
plain grammar with the library's defaults (parser.grammar.train_grammar) and the refined one by
``--cycles`` split-merge cycles from the coarse base (parser.latent.train_refined), and parses
the first ``--limit`` test sentences of at most 40 words from words only (the refined grammar
coarse-to-fine, as the service does). Printed per row: training trees, consensus and Viterbi
labelled F1 (parser.scoring) of both grammars, the refined minus plain consensus gain, and
the training and parsing CPU seconds (time.process_time).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from parser.binarize import clean_tree  # noqa: E402
from parser.chart import parse  # noqa: E402
from parser.grammar import Grammar, train_grammar  # noqa: E402
from parser.latent import train_refined  # noqa: E402
from parser.scoring import score_corpus  # noqa: E402
from parser.trees import read_trees  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"
SPLITS = {"last": (range(0, 89), range(89, 99)), "dev": (range(0, 79), range(79, 89))}


def _read(path: Path) -> list:
    return read_trees(path.read_text(encoding="utf-8"), source=str(path))


def gum_split(split: str, limit: int | None) -> tuple[list, list]:
    """(training trees, the first ``limit`` test sentences of at most 40 words, cleaned)."""
    files = sorted(GUM.glob("*.ptb"))[:99]
    if len(files) < 99:
        sys.exit(f"expected the shared GUM trees at {GUM}")
    train_idx, test_idx = SPLITS[split]
    gold = [
        c for i in test_idx for t in _read(files[i]) if len((c := clean_tree(t)).leaves()) <= 40
    ]
    return [t for i in train_idx for t in _read(files[i])], gold[:limit]


def _score(g: Grammar, gold: list) -> tuple[float, float, float]:
    """(consensus F1, Viterbi F1, parse CPU seconds) on ``gold``."""
    t0 = time.process_time()
    results = [parse(g, t.leaves(), posteriors=True) for t in gold]
    spent = time.process_time() - t0
    viterbi = score_corpus(zip(gold, [r.trees[0] for r in results], strict=True))
    consensus = score_corpus(zip(gold, [r.consensus or r.trees[0] for r in results], strict=True))
    return 100 * consensus.f1, 100 * viterbi.f1, spent


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fractions", type=float, nargs="+", default=[0.25, 0.5, 1.0])
    ap.add_argument("--split", choices=sorted(SPLITS), default="last")
    ap.add_argument("--limit", type=int, default=200)
    ap.add_argument("--cycles", type=int, default=4)
    args = ap.parse_args()
    files = sorted(GUM.glob("*.ptb"))[:99]
    if len(files) < 99:
        sys.exit(f"expected the shared GUM trees at {GUM}")
    train_idx, test_idx = SPLITS[args.split]
    gold = [
        c for i in test_idx for t in _read(files[i]) if len((c := clean_tree(t)).leaves()) <= 40
    ]
    gold = gold[: args.limit]
    print(
        f"split {args.split}: {len(gold)} test sentences (<= 40 words, words only); "
        f"refined {args.cycles} cycles",
        flush=True,
    )
    print(
        "files trees | plain cons Vit | refined cons Vit | gain | train s plain refined | parse s"
    )
    for fraction in args.fractions:
        n_files = max(1, round(fraction * len(train_idx)))
        train = [t for i in list(train_idx)[:n_files] for t in _read(files[i])]
        t0 = time.process_time()
        plain = train_grammar(train)
        t1 = time.process_time()
        refined = train_refined(train, args.cycles)
        t2 = time.process_time()
        pc, pv, ps = _score(plain, gold)
        rc, rv, rs = _score(refined, gold)
        print(
            f"{n_files:5d} {len(train):5d} | {pc:6.2f} {pv:6.2f} | {rc:6.2f} {rv:6.2f} | "
            f"{rc - pc:+5.2f} | {t1 - t0:5.1f} {t2 - t1:6.1f} | {ps:6.1f} {rs:6.1f}",
            flush=True,
        )


if __name__ == "__main__":
    main()
