"""Parser speed, side by side in one run: our Viterbi against NLTK's ViterbiParser (reference
library) on the same grammar and sentences, then our own times by sentence length.

Usage: python bench/parse_speed.py [--quick] [--refine N]

Prints: training time on all shared GUM trees (Zeldes 2017), grammar load time, per-sentence
NLTK/ours ratios on five held-out sentences of 11-20 words (CPU time, both on one thread: NLTK
is single-threaded Python, ours runs with one numba thread; ours the median of repeats, NLTK
one run each, it is slow), our median times at 10, 20, 30 and 40 words (over five sentences
of each length, five runs each; three and three with --quick) for Viterbi, k = 10, posteriors
and the full suggestion, peak memory; last line ``speedup_vs_nltk_len11_20=<median ratio>``.

The comparison grammar is trained with the service's own defaults (the same markovization and
annotation as a corpus's grammar): on every GUM tree but the test sentences' files for the
full run, on the first 1,500 trees with ``--quick`` (a grammar of several hundred symbols; its
size is printed). The test sentences are never in its training trees.

With ``--refine N`` it also trains the refined grammar of N split-merge cycles
(parser.latent.train_refined) on all GUM trees (CPU seconds and peak memory of the training,
its file size and load time) and prints the length table for it beside the plain grammar's,
all single-threaded CPU time, with one more column: a constrained re-parse with two pinned
gold constituents (k = 10 and posteriors, as the Bench's re-parse asks). The refined grammar
has two rows: pruned coarse-to-fine through its base symbols only (``one level``, as a grammar
saved without its cycle hierarchy), and through every level of the hierarchy (the default).
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

import numba  # noqa: E402
from nltk.parse import ViterbiParser  # noqa: E402

from parser.binarize import clean_tree  # noqa: E402
from parser.chart import Constraints, parse  # noqa: E402
from parser.grammar import Grammar, train_grammar  # noqa: E402
from parser.latent import train_refined, without_hierarchy  # noqa: E402
from parser.nltk_bridge import to_nltk  # noqa: E402
from parser.trees import constituents, read_trees  # noqa: E402

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


def _cpu(fn, repeats: int = 1) -> float:
    """Median CPU seconds of this process over ``repeats`` calls."""
    spent = []
    for _ in range(repeats):
        t0 = time.process_time()
        fn()
        spent.append(time.process_time() - t0)
    return statistics.median(spent)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--refine", type=int, default=0, help="also time a refined grammar")
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

    # Five held-out sentences of 11-20 words, each of a different length where the test part
    # has them; the comparison grammar never saw them.
    cut = 1500 if args.quick else len(trees) - 300
    ref_g = train_grammar(trees[:cut])
    held = {}
    for t in trees[cut:]:
        n = len(t.leaves())
        if 11 <= n <= 20 and n not in held:
            held[n] = t.leaves()
    picks = [held[n] for n in sorted(held)][:5]
    print(f"NLTK comparison grammar (service defaults, first {cut} trees): {ref_g!r}")
    numba.set_num_threads(1)  # both sides on one thread
    ratios = []
    for words in picks:
        pcfg, tokens = to_nltk(ref_g, [words])
        ref = ViterbiParser(pcfg, max_time=None)
        best: list = []
        t0 = time.process_time()
        best.extend(ref.parse(tokens[0]))
        nltk_s = time.process_time() - t0
        ours_s = _cpu(lambda w=words: parse(ref_g, w), 5 if args.quick else 11)
        ours = parse(ref_g, words)
        same = bool(best) and math.isclose(
            best[0].logprob() * math.log(2), ours.logprobs[0], abs_tol=1e-9
        )
        ratios.append(nltk_s / ours_s)
        print(
            f"len {len(words):2d}: nltk {nltk_s:8.2f} s CPU  ours {1000 * ours_s:7.2f} ms CPU"
            f"  ratio {nltk_s / ours_s:8.0f}  same best log-prob: {same}"
        )
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)

    repeats = 3 if args.quick else 5
    n_sent = 3 if args.quick else 5
    print(
        f"ours by length (median ms over {n_sent} sentences x {repeats} runs): "
        "viterbi | k=10 | posteriors | best+k=10+posteriors"
    )
    for n in (10, 20, 30, 40):
        group = by_len.get(n, [])[:n_sent]
        if not group:
            continue
        cols = []
        for kw in ({}, {"k": 10}, {"posteriors": True}, {"k": 10, "posteriors": True}):
            runs = [t for w in group for t in _times(lambda w=w, kw=kw: parse(g, w, **kw), repeats)]
            cols.append(statistics.median(runs))
        print(f"len {n:2d}: " + " | ".join(f"{1000 * c:8.1f}" for c in cols))
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak memory: {peak:.0f} MB")
    if args.refine:
        _refined_rows(trees, g, args.refine, n_sent, repeats)
    print(
        f"speedup_vs_nltk_len11_20={statistics.median(ratios):.0f} (median of {len(ratios)} "
        "sentences, CPU time, one thread each)"
    )


def _refined_rows(trees: list, plain: Grammar, cycles: int, n_sent: int, repeats: int) -> None:
    t0 = time.process_time()
    g = train_refined(trees, cycles)
    train_s = time.process_time() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "g.npz"
        g.save(path)
        size = path.stat().st_size
        load_s = _median_time(lambda: Grammar.load(path), 5)
        g = Grammar.load(path)
    print(
        f"refined, {cycles} cycles: training {train_s:.1f} s CPU, peak memory {peak:.0f} MB, "
        f"file {size / 1e6:.1f} MB, load {1000 * load_s:.0f} ms ({g!r})"
    )
    numba.set_num_threads(1)
    by_len: dict[int, list] = {}
    for t in trees:
        by_len.setdefault(len(t.leaves()), []).append(t)
    print(
        "single thread, median CPU ms: viterbi | k=10 | posteriors | best+k=10+posteriors | "
        "pins+k=10+posteriors"
    )
    rows = (("plain", plain), ("refined, one level", without_hierarchy(g)), ("refined", g))
    for name, grammar in rows:
        parse(grammar, ["warm", "up", "."], k=2, posteriors=True)
        for n in (10, 20, 30, 40):
            group = by_len.get(n, [])[:n_sent]
            cols = []
            for kw in ({}, {"k": 10}, {"posteriors": True}, {"k": 10, "posteriors": True}, None):
                runs = []
                for t in group:
                    if kw is None:
                        pins = [(s, e, lab) for lab, s, e in constituents(clean_tree(t))[1:3]]
                        kw2: dict = {"k": 10, "posteriors": True}
                        kw2["constraints"] = Constraints(required=pins)
                    else:
                        kw2 = kw
                    runs.append(
                        _cpu(lambda t=t, kw2=kw2, gr=grammar: parse(gr, t.leaves(), **kw2), repeats)
                    )
                cols.append(statistics.median(runs))
            print(f"{name:18s} len {n:2d}: " + " | ".join(f"{1000 * c:8.1f}" for c in cols))
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)


if __name__ == "__main__":
    main()
