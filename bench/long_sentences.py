"""Parse time and memory by sentence length up to the import limit, side by side in one run.

Usage: python bench/long_sentences.py [--files N]

Trains a grammar on the first N shared GUM files (Zeldes 2017; default 30), builds sentences of
25, 50, 100, 150 and 250 words by joining the words of consecutive GUM sentences from the
other files, and prints for each length the CPU seconds of Viterbi with k = 5 (what the Bench
lists) and of the full suggestion (k = 5, posteriors and the consensus tree), each the median
of three runs, with the ratio to the 25-word time beside the n^3 ratio, and the peak memory.
It shows what the length policy in DEVELOPERS.md ("Sentence length") is based on.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from parser.chart import MAX_WORDS, parse  # noqa: E402
from parser.grammar import train_grammar  # noqa: E402
from parser.trees import read_trees, words  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"
LENGTHS = (25, 50, 100, 150, MAX_WORDS)


def _cpu(fn, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.process_time()
        fn()
        times.append(time.process_time() - t0)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--files", type=int, default=30)
    args = ap.parse_args()
    files = sorted(GUM.glob("*.ptb"))
    if not files:
        sys.exit(f"no shared trees at {GUM}")
    train = [t for f in files[: args.files] for t in read_trees(f.read_text(encoding="utf-8"))]
    t0 = time.process_time()
    grammar = train_grammar(train)
    print(f"trained on {len(train)} trees in {time.process_time() - t0:.1f} s CPU")
    stream = [
        w
        for f in files[args.files :]
        for t in read_trees(f.read_text(encoding="utf-8"))
        for w in words(t)
    ]
    parse(grammar, stream[:5], k=2, posteriors=True)  # load the compiled loops first
    base_v = base_s = 0.0
    print(
        f"{'words':>6} {'viterbi+k5 s':>13} {'ratio':>7} {'suggestion s':>13} {'ratio':>7} "
        f"{'n^3 ratio':>10}"
    )
    for n in LENGTHS:
        sentence = stream[:n]
        v = _cpu(lambda s=sentence: parse(grammar, s, k=5))
        s = _cpu(lambda s=sentence: parse(grammar, s, k=5, posteriors=True))
        if n == LENGTHS[0]:
            base_v, base_s = v, s
        print(
            f"{n:>6} {v:>13.3f} {v / base_v:>7.1f} {s:>13.3f} {s / base_s:>7.1f} "
            f"{(n / LENGTHS[0]) ** 3:>10.0f}"
        )
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak memory {peak:.0f} MB")


if __name__ == "__main__":
    main()
