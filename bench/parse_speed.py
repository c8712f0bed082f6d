"""Parser speed, side by side in one run: our Viterbi against NLTK's ViterbiParser (reference
library) on the same grammar and sentences, then our own times by sentence length.

Usage: python bench/parse_speed.py [--quick]

Prints: training time on all shared GUM trees (Zeldes 2017), grammar load time, per-sentence
NLTK/ours ratios on 11-20 word sentences (ours: median of repeats; NLTK: one run each, it is
slow), our median times at 10, 20, 30 and 40 words (over five sentences of each length, five
runs each; three and three with --quick) for Viterbi, k = 10, posteriors and the full
suggestion (best, k = 10, posteriors and the consensus tree), peak memory; last line
``speedup_vs_nltk_len11_20=<median ratio>``. ``--quick`` runs the NLTK comparison on two
sentences with a small grammar (400 trees, h=0, v=1; both parsers use it) and fewer repeats.
"""

from __future__ import annotations

import argparse
import math
import resource
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from nltk.parse import ViterbiParser  # noqa: E402

from parser.chart import parse  # noqa: E402
from parser.grammar import Grammar, train_grammar  # noqa: E402
from parser.nltk_bridge import to_nltk  # noqa: E402
from parser.trees import read_trees  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"


def _times(fn, repeats: int) -> list[float]:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return times


def _median_time(fn, repeats: int) -> float:
    return statistics.median(_times(fn, repeats))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    files = sorted(GUM.glob("*.ptb"))
    if not files:
        sys.exit(f"no shared trees at {GUM}")
    trees = [t for f in files for t in read_trees(f.read_text(encoding="utf-8"))]
    t0 = time.perf_counter()
    g = train_grammar(trees)
    train_s = time.perf_counter() - t0
    print(f"training: {len(trees)} trees in {train_s:.2f} s ({g!r})")
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "g.npz"
        g.save(path)
        load_s = _median_time(lambda: Grammar.load(path), 5)
        g = Grammar.load(path)
    print(f"load: {1000 * load_s:.1f} ms (median of 5)")
    parse(g, ["warm", "up", "."], k=2, posteriors=True)  # compile or load the numba cache

    sentences = [t.leaves() for t in trees]
    by_len: dict[int, list[list[str]]] = {}
    for s in sentences:
        by_len.setdefault(len(s), []).append(s)

    n_nltk = 2 if args.quick else 5
    picks = [by_len[n][0] for n in (11, 13, 15, 17, 19)[:n_nltk] if n in by_len]
    # NLTK takes minutes per sentence with the full grammar; --quick compares on a small
    # grammar (the first 400 trees, no markovization or annotation) to stay near a minute.
    ref_g = train_grammar(trees[:400], horizontal=0, vertical=1, tag_ancestors=0) \
        if args.quick else g
    print(f"NLTK comparison grammar: {ref_g!r}")
    ratios = []
    for words in picks:
        pcfg, tokens = to_nltk(ref_g, [words])
        ref = ViterbiParser(pcfg, max_time=None)
        t0 = time.perf_counter()
        best = list(ref.parse(tokens[0]))
        nltk_s = time.perf_counter() - t0
        ours_s = _median_time(lambda w=words: parse(ref_g, w), 5 if args.quick else 11)
        ours = parse(ref_g, words)
        same = bool(best) and math.isclose(best[0].logprob() * math.log(2), ours.logprobs[0],
                                           abs_tol=1e-9)
        ratios.append(nltk_s / ours_s)
        print(f"len {len(words):2d}: nltk {nltk_s:8.2f} s  ours {1000 * ours_s:7.2f} ms  "
              f"ratio {nltk_s / ours_s:8.0f}  same best log-prob: {same}")

    repeats = 3 if args.quick else 5
    n_sent = 3 if args.quick else 5
    print(f"ours by length (median ms over {n_sent} sentences x {repeats} runs): "
          "viterbi | k=10 | posteriors | best+k=10+posteriors")
    for n in (10, 20, 30, 40):
        group = by_len.get(n, [])[:n_sent]
        if not group:
            continue
        cols = []
        for kw in ({}, {"k": 10}, {"posteriors": True}, {"k": 10, "posteriors": True}):
            runs = [t for w in group
                    for t in _times(lambda w=w, kw=kw: parse(g, w, **kw), repeats)]
            cols.append(statistics.median(runs))
        print(f"len {n:2d}: " + " | ".join(f"{1000 * c:8.1f}" for c in cols))
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak memory: {peak:.0f} MB")
    print(f"speedup_vs_nltk_len11_20={statistics.median(ratios):.0f}")


if __name__ == "__main__":
    main()
