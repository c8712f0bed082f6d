"""Held-out scoring of a new grammar version on a bounded random sample, and the gate that
decides whether it becomes active, sampling noise taken into account.

The sample (:func:`sample_ids`)
    At most ``heldout_sample`` (corpus setting) of the held-out gold trees are parsed: those
    whose sentence ids have the smallest keyed hashes (BLAKE2b of the corpus and sentence
    ids). Hash order is a uniform random order unrelated to the sentences' content, so this is
    a simple random sample; and since a sentence's hash never changes, successive versions
    draw largely the same sentences as held-out gold grows, which is what makes the paired
    comparison below possible (common practice, no source).

The figure
    The corpus F1 over the sample with its 95% percentile bootstrap interval over sentences
    (:func:`parser.interval.f1_interval`), recorded in the version's ``options["heldout"]``
    with the per-sentence counts (``per_sentence``: sentence id -> matched, gold, test) that
    the next version's gate compares against.

The gate (:func:`decide`), with ``max_f1_drop`` (corpus setting) as the allowed drop
    * **Paired**, when the new and the active version scored at least :data:`MIN_PAIRED`
      sentences in common: the drop is the active version's F1 minus the new one's on those
      sentences, with its paired bootstrap interval (:func:`parser.interval.drop_interval`).
      The new version is rejected when the whole interval lies above ``max_f1_drop``
      (its low end > ``max_f1_drop``): a drop larger than allowed beyond the sampling noise.
    * **Unpaired** otherwise (the active version was scored before per-sentence counts were
      kept, or on other sentences): the drop of the two recorded F1 figures, with standard
      error ``sqrt(se_active^2 + se_new^2)`` (a version without a recorded error counts 0);
      rejected when ``drop - 1.96 * se > max_f1_drop``, the normal approximation of the same
      rule. Overlapping samples make the true error smaller than this, so the rule errs
      towards keeping a new grammar, which is trained on more gold.

    With no sampling noise (both errors 0) both rules reduce to the former one: rejected when
    the new F1 is more than ``max_f1_drop`` below the active one's.

Cost: one hash per held-out sentence, and a few milliseconds of numpy for the intervals.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from parser.interval import LEVEL, RESAMPLES, drop_interval

#: Sentences two versions must have scored in common for the paired comparison.
MIN_PAIRED = 20
#: The normal quantile of a two-sided 95% interval.
Z95 = 1.959964
METHOD = (
    f"percentile bootstrap over sentences, {RESAMPLES} resamples, {round(LEVEL * 100)}% "
    "(Efron and Tibshirani 1993)"
)


def _key(corpus_id: int, sentence_id: int) -> bytes:
    return hashlib.blake2b(f"{corpus_id}:{sentence_id}".encode(), digest_size=8).digest()


def sample_ids(corpus_id: int, sentence_ids: Sequence[int], limit: int) -> set[int]:
    """The ids of the at most ``limit`` held-out sentences scored (see the module docstring)."""
    if len(sentence_ids) <= limit:
        return set(sentence_ids)
    ranked = sorted(sentence_ids, key=lambda sid: _key(corpus_id, sid))
    return set(ranked[:limit])


@dataclass(frozen=True)
class Decision:
    """Whether the new version is rejected, and why (``detail`` is stored on the version)."""

    rejected: bool
    detail: dict[str, Any]

    def reason(self, max_drop: float) -> str:
        d = self.detail
        if d["method"] == "paired":
            return (
                f"its held-out F1 is {d['drop']:.4f} lower on {d['sentences']} sentences both "
                f"versions scored, 95% interval of the drop {d['low']:.4f} to {d['high']:.4f}, "
                f"all above the allowed {max_drop:g}"
            )
        return (
            f"its held-out F1 is {d['drop']:.4f} lower, more than the allowed {max_drop:g} "
            f"by over 1.96 standard errors ({d['se']:.4f})"
        )


def _per_sentence(detail: dict[str, Any] | None) -> dict[int, tuple[int, int, int]]:
    raw = (detail or {}).get("per_sentence") or {}
    return {int(sid): (int(c[0]), int(c[1]), int(c[2])) for sid, c in raw.items()}


def decide(
    new_f1: float | None,
    new_detail: dict[str, Any],
    active_f1: float | None,
    active_detail: dict[str, Any] | None,
    max_drop: float,
) -> Decision:
    """The gate of the module docstring; never rejects without both F1 figures."""
    if new_f1 is None or active_f1 is None:
        return Decision(False, {"method": "none", "reason": "no held-out F1 to compare"})
    ours = _per_sentence(new_detail)
    theirs = _per_sentence(active_detail)
    common = sorted(set(ours) & set(theirs))
    if len(common) >= MIN_PAIRED:
        interval = drop_interval([theirs[s] for s in common], [ours[s] for s in common])
        return Decision(
            interval.low > max_drop,
            {
                "method": "paired",
                "drop": round(interval.value, 6),
                "low": round(interval.low, 6),
                "high": round(interval.high, 6),
                "sentences": len(common),
                "max_f1_drop": max_drop,
            },
        )
    se_new = float(new_detail.get("se") or 0.0)
    se_active = float((active_detail or {}).get("se") or 0.0)
    se = math.sqrt(se_new**2 + se_active**2)
    drop = active_f1 - new_f1
    return Decision(
        drop - Z95 * se > max_drop,
        {
            "method": "unpaired",
            "drop": round(drop, 6),
            "se": round(se, 6),
            "sentences": len(common),
            "max_f1_drop": max_drop,
        },
    )
