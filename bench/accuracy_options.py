"""Parsing accuracy of the grammar options, side by side in one run, on the GUM split.

Usage: python bench/accuracy_options.py [--only NAME ...]

Open data set: GUM (Zeldes 2017), ../shared/data/gum-trees. Trains on the 89 files whose names
sort first, parses the sentences of at most 40 words of the last 10 from words only, and prints,
for each option set, labelled bracket F1 (parser.scoring) of the Viterbi tree and of the
consensus tree (parser.consensus, the tree the service starts annotators from), precision and
recall of the consensus, the number of fallback trees, the grammar's size and the training and
parsing CPU seconds (time.process_time, so that a loaded machine changes little). The options
are the feature annotations of parser.annotate (Klein and Manning 2003), markovization (with
the variable-order threshold min_context) and the factoring, and the lexicon smoothing
parameters of parser.lexicon, and split-merge refinement (parser.latent; ``refine=N``: N
cycles from the default grammar, parsed with the exported refined grammar, whose posteriors
the chart projects onto ordinary labels; ``refined=N``: N cycles from the coarse base grammar
parser.latent.COARSE_BASE, as the service trains them, parsed coarse-to-fine); whatever an
option does not name is the library's default. ``--limit N`` parses only the first N test
sentences (every row the same ones). ``--split last|first|middle`` holds out the last 10
files (default), the first 10, or the 46th to 55th, and trains on the other 89.
``--gold-tags`` parses with the gold POS tags fixed instead of words only. ``--max-rule`` adds
the F1 of the max-rule-product tree (Petrov and Klein 2007; parser.kernels.max_rule) beside the
consensus, from the same charts.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from parser.binarize import clean_tree  # noqa: E402
from parser.chart import Constraints, parse  # noqa: E402
from parser.grammar import DEFAULT_FEATURES, train_grammar  # noqa: E402
from parser.latent import DEFAULT_PRUNE, RefineOptions, refine, train_refined  # noqa: E402
from parser.scoring import score_corpus  # noqa: E402
from parser.trees import read_trees  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"

_PREVIOUS = ("split-vp", "unary-internal")
OPTIONS: dict[str, dict] = {
    "default": {},
    "no-features": {"features": ()},
    "split-vp+unary-internal": {"features": _PREVIOUS},
    "+in-grandparent": {"features": _PREVIOUS + ("in-grandparent",)},
    "+base-np": {"features": _PREVIOUS + ("base-np",)},
    "+right-rec-np": {"features": _PREVIOUS + ("right-rec-np",)},
    "+tmp-np": {"features": _PREVIOUS + ("tmp-np",)},
    "+possessive-np": {"features": _PREVIOUS + ("possessive-np",)},
    "+unary-dt": {"features": _PREVIOUS + ("unary-dt",)},
    "+split-aux": {"features": _PREVIOUS + ("split-aux",)},
    "default+dominates-verb": {"features": DEFAULT_FEATURES + ("dominates-verb",)},
    "default+clause-functions": {"features": DEFAULT_FEATURES + ("clause-functions",)},
    "default+function-tags": {"features": DEFAULT_FEATURES + ("function-tags",)},
    "default,h=1": {"horizontal": 1},
    "default,h=3": {"horizontal": 3},
    "default,annotated-intermediates": {"plain_intermediates": False},
    "default,v=3": {"vertical": 3},
    "default,head-outward": {"head_outward": True},
    "default,alpha=0.5": {"alpha": 0.5},
    "default,beta=0.5": {"beta": 0.5},
    "default,min-context=0": {"min_context": 0},
    "default,min-context=3": {"min_context": 3},
    "default,min-context=10": {"min_context": 10},
    "default,v=3,min-context=0": {"vertical": 3, "min_context": 0},
    "refine=1": {"refine": 1},
    "refine=2": {"refine": 2},
    "refined=3": {"refined": 3},
    "refined=4": {"refined": 4},
}
SPLITS = {"last": range(89, 99), "first": range(0, 10), "middle": range(45, 55)}


def _read(path: Path) -> list:
    return read_trees(path.read_text(encoding="utf-8"), source=str(path))


def _progress(cycle: int, iteration: int, loglik: float) -> None:
    print(
        f"  cycle {cycle} EM {iteration:2d} log-likelihood {loglik:.1f}",
        file=sys.stderr,
        flush=True,
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", nargs="*", choices=sorted(OPTIONS))
    ap.add_argument("--limit", type=int, default=None, help="parse only the first N test sentences")
    ap.add_argument("--split", choices=sorted(SPLITS), default="last")
    ap.add_argument("--gold-tags", action="store_true", help="fix the gold POS tags")
    ap.add_argument("--max-rule", action="store_true", help="also score the max-rule tree")
    args = ap.parse_args()
    files = sorted(GUM.glob("*.ptb"))[:99]
    if len(files) < 99:
        sys.exit(f"expected the shared GUM trees at {GUM}")
    held = SPLITS[args.split]
    train = [t for i, f in enumerate(files) if i not in held for t in _read(f)]
    gold = [c for i in held for t in _read(files[i]) if len((c := clean_tree(t)).leaves()) <= 40][
        : args.limit
    ]
    print(
        f"split {args.split}: train {len(train)} trees, test {len(gold)} sentences (<= 40 words)"
        + (", gold tags" if args.gold_tags else ", words only"),
        flush=True,
    )
    for name in args.only or list(OPTIONS):
        t0 = time.process_time()
        options = dict(OPTIONS[name])
        cycles = options.pop("refine", 0)
        refined = options.pop("refined", 0)
        g = train_refined(train, refined, progress=_progress) if refined else None
        g = g or train_grammar(train, **options)
        if cycles:
            g = refine(g, train, RefineOptions(cycles=cycles), progress=_progress).to_grammar(
                prune=DEFAULT_PRUNE
            )
        t1 = time.process_time()
        results = [
            parse(
                g,
                t.leaves(),
                posteriors=True,
                constraints=Constraints(tags=[p for _, p in t.pos()]) if args.gold_tags else None,
                max_rule=args.max_rule,
            )
            for t in gold
        ]
        t2 = time.process_time()
        viterbi = score_corpus(zip(gold, [r.trees[0] for r in results], strict=True))
        score = score_corpus(zip(gold, [r.consensus or r.trees[0] for r in results], strict=True))
        fallbacks = sum(r.fallback for r in results)
        extra = ""
        if args.max_rule:
            rule = score_corpus(zip(gold, [r.max_rule or r.trees[0] for r in results], strict=True))
            extra = (
                f"  max-rule {100 * rule.f1:6.2f}  (P {100 * rule.precision:6.2f}"
                f"  R {100 * rule.recall:6.2f})"
            )
        print(
            f"{name:26s} F1 Viterbi {100 * viterbi.f1:6.2f}  consensus {100 * score.f1:6.2f}"
            f"  (P {100 * score.precision:6.2f}  R {100 * score.recall:6.2f})  fallbacks "
            f"{fallbacks}  symbols {len(g.symbols)}  train {t1 - t0:5.1f} s  parse "
            f"{t2 - t1:6.1f} s CPU{extra}",
            flush=True,
        )


if __name__ == "__main__":
    main()
