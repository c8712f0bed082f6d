"""The bootstrap interval of corpus F1 (parser.interval) against what the statistics of a
mean say it must be, and the paired interval of a drop."""

from __future__ import annotations

import math
import random

import pytest

from parser.interval import drop_interval, f1_interval


def _sentences(n: int, seed: int) -> list[tuple[int, int, int]]:
    """Sentences of 10 gold and 10 test constituents, 5-10 of them matched."""
    rng = random.Random(seed)
    return [(rng.randint(5, 10), 10, 10) for _ in range(n)]


def test_f1_interval_standard_error_is_that_of_a_mean() -> None:
    # With gold + test constant per sentence, corpus F1 is the mean of the per-sentence F1s,
    # whose standard error is sd / sqrt(n); the bootstrap's is that times sqrt((n - 1) / n)
    # (Efron and Tibshirani 1993, ch. 5, the plug-in estimate; from memory).
    counts = _sentences(300, seed=3)
    f1s = [2 * m / (g + t) for m, g, t in counts]
    mean = sum(f1s) / len(f1s)
    sd = math.sqrt(sum((x - mean) ** 2 for x in f1s) / (len(f1s) - 1))
    expected_se = sd / math.sqrt(len(f1s)) * math.sqrt((len(f1s) - 1) / len(f1s))
    interval = f1_interval(counts, resamples=4000, seed=1)
    assert interval.value == pytest.approx(mean)
    assert interval.se == pytest.approx(expected_se, rel=0.1)
    # the percentile interval of a near-normal statistic: about mean +- 1.96 se
    # (common practice, no source)
    assert interval.low == pytest.approx(mean - 1.96 * expected_se, abs=expected_se * 0.3)
    assert interval.high == pytest.approx(mean + 1.96 * expected_se, abs=expected_se * 0.3)
    assert interval.sentences == 300 and interval.level == 0.95


def test_f1_interval_narrows_with_more_sentences_and_is_reproducible() -> None:
    small = f1_interval(_sentences(50, seed=5))
    large = f1_interval(_sentences(800, seed=5))
    assert large.high - large.low < (small.high - small.low) / 2  # ~ 1 / sqrt(16)
    assert f1_interval(_sentences(50, seed=5)) == small


def test_f1_interval_of_identical_sentences_has_no_width() -> None:
    interval = f1_interval([(7, 10, 9)] * 40)
    assert interval.low == interval.high == interval.value == pytest.approx(14 / 19)
    assert interval.se == pytest.approx(0.0)


def test_f1_interval_refuses_impossible_counts() -> None:
    with pytest.raises(ValueError, match="matched <= gold"):
        f1_interval([(5, 4, 10)])


def test_drop_interval_is_paired() -> None:
    before = _sentences(200, seed=11)
    # the same sentences, one constituent fewer matched in each: a drop of exactly 2 / 20 = 0.1,
    # which pairing sees without noise although the sentences vary a lot
    after = [(m - 1, g, t) for m, g, t in before]
    drop = drop_interval(before, after)
    assert drop.value == pytest.approx(0.1)
    assert drop.low == pytest.approx(0.1) and drop.high == pytest.approx(0.1)
    unpaired_width = f1_interval(before).high - f1_interval(before).low
    assert unpaired_width > 0.02
    same = drop_interval(before, before)
    assert same.low == same.high == 0.0
    with pytest.raises(ValueError, match="not paired"):
        drop_interval(before, after[:-1])
