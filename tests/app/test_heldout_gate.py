"""The held-out gate (app.services.heldout_gate): a bounded random sample that stays put as
held-out gold grows, and a rejection only when the drop exceeds max_f1_drop beyond the noise."""

from __future__ import annotations

import random

from app.services.heldout_gate import MIN_PAIRED, decide, sample_ids


def test_sample_is_bounded_and_mostly_kept_as_heldout_gold_grows() -> None:
    ids = list(range(10, 4000, 10))
    first = sample_ids(7, ids, 100)
    assert len(first) == 100 and first <= set(ids)
    grown = sample_ids(7, ids + list(range(4000, 4400, 10)), 100)
    # 10% more held-out gold: about 10% of the sample is replaced, the rest stays
    assert len(first & grown) >= 80
    assert sample_ids(7, ids[:50], 100) == set(ids[:50])  # fewer than the bound: all
    # not the first ids: spread over the whole range (a random sample, not a prefix)
    assert max(first) > 3000 and min(first) < 1000


def _detail(counts: dict[int, tuple[int, int, int]], se: float = 0.0) -> dict:
    return {"per_sentence": {str(k): list(v) for k, v in counts.items()}, "se": se}


def _f1(counts: dict[int, tuple[int, int, int]]) -> float:
    m = sum(c[0] for c in counts.values())
    both = sum(c[1] + c[2] for c in counts.values())
    return 2 * m / both


def test_paired_gate_rejects_a_clear_drop_and_keeps_noise() -> None:
    rng = random.Random(4)
    active = {sid: (rng.randint(6, 10), 10, 10) for sid in range(100)}
    # three constituents fewer matched in every sentence: a drop of 0.3, clear of 0.01
    worse = {sid: (m - 3, g, t) for sid, (m, g, t) in active.items()}
    d = decide(_f1(worse), _detail(worse), _f1(active), _detail(active), 0.01)
    assert d.rejected and d.detail["method"] == "paired" and d.detail["low"] > 0.01
    assert "interval of the drop" in d.reason(0.01)
    # one sentence a little worse: an observed drop below the interval's reach
    slightly = dict(active)
    slightly[0] = (active[0][0] - 2, 10, 10)
    d = decide(_f1(slightly), _detail(slightly), _f1(active), _detail(active), 0.0)
    assert not d.rejected and d.detail["low"] <= 0.0 < d.detail["drop"]


def test_unpaired_gate_counts_both_standard_errors() -> None:
    # no sentences in common (an older active version without per-sentence counts)
    few = {sid: (8, 10, 10) for sid in range(MIN_PAIRED - 1)}
    # a drop of 0.05 with an allowance of 0.01: rejected without noise...
    assert decide(0.75, {}, 0.80, None, 0.01).rejected
    # ...kept when 1.96 standard errors cover the excess (sqrt(0.02^2 + 0.02^2) = 0.028)
    kept = decide(0.75, {"se": 0.02}, 0.80, {"se": 0.02}, 0.01)
    assert not kept.rejected and kept.detail["method"] == "unpaired"
    assert decide(0.70, {"se": 0.02}, 0.80, {"se": 0.02}, 0.01).rejected
    # too few common sentences for pairing: the unpaired rule applies
    assert decide(0.80, _detail(few), 0.80, _detail(few), 0.01).detail["method"] == "unpaired"
    assert not decide(None, {}, 0.8, None, 0.01).rejected
