"""Plain or refined grammar: the choice made at each retraining by held-out F1.

What it computes
    :func:`choose` trains refined grammars (parser.latent.train_refined: split-merge cycles
    from a coarse base grammar) on the training slice, scores each cycle's grammar on the
    held-out gold with the caller's scorer (the same one the plain grammar was scored with),
    and returns the number of cycles whose F1 beats the plain grammar's, or 0 to keep the
    plain grammar, with a record of what was tried for the grammar version's options.
    Refinement is tried only when the corpus has ``refine_min_gold`` gold trees, held-out
    gold to score on, ``refine_cycles`` > 0 and its reference trees (if any) counted as plain
    counts, since split-merge re-estimates the grammar from the trees as they are.
    :func:`train_final` trains the chosen grammar on all the trees.

Complexity: the cycles' EM passes are linear in the training nodes (with a factor of the
sub-symbols per node cubed); one held-out parse per held-out tree and cycle, coarse-to-fine.
Limits: the cycles are scored in one run of training, so a cycle's grammar is exactly the one
that run would export after that many cycles.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

from nltk import Tree

from parser.grammar import Grammar, Weighting
from parser.latent import COARSE_BASE, train_refined


def choose(
    train: Sequence[Tree],
    n_gold: int,
    n_held: int,
    reference: Sequence[Tree],
    weighting: Weighting,
    plain_f1: float | None,
    max_cycles: int,
    min_gold: int,
    score: Callable[[Grammar], tuple[float, dict[str, Any]]],
    progress: Callable[[str], None] | None = None,
) -> tuple[int, dict[str, Any], dict[str, Any] | None]:
    """(cycles chosen, 0 for the plain grammar; the record for the version's options; the
    held-out detail of the chosen refined grammar, or None)."""
    record: dict[str, Any] = {"max_cycles": max_cycles, "min_gold": min_gold, "chosen": 0}
    reason = None
    if max_cycles < 1:
        reason = "refinement is off for this corpus"
    elif n_gold < min_gold:
        reason = f"{n_gold} gold trees, refinement needs {min_gold}"
    elif n_held == 0 or plain_f1 is None:
        reason = "no held-out gold to choose with"
    elif reference and weighting != Weighting():
        reason = "reference trees are weighted; refinement counts trees as they are"
    if reason is not None or plain_f1 is None:
        record["reason"] = reason
        return 0, record, None
    record["base"] = {k: list(v) if isinstance(v, tuple) else v for k, v in COARSE_BASE.items()}
    scores: dict[int, tuple[float, dict[str, Any]]] = {}

    def after_cycle(cycle: int, g: Grammar) -> None:
        if progress is not None:
            progress(f"scoring the refined grammar of cycle {cycle} on the held-out gold")
        scores[cycle] = score(g)

    def report(cycle: int, iteration: int, loglik: float) -> None:
        if progress is not None:
            progress(
                f"refining: cycle {cycle}, EM iteration {iteration}, log-likelihood {loglik:.1f}"
            )

    train_refined([*train, *reference], max_cycles, progress=report, after_cycle=after_cycle)
    record["heldout_f1"] = {str(c): round(f, 5) for c, (f, _) in sorted(scores.items())}
    record["plain_f1"] = round(plain_f1, 5)
    best = max(scores, key=lambda c: (scores[c][0], -c))
    if scores[best][0] > plain_f1:
        record["chosen"] = best
        record["reason"] = f"{best} cycles beat the plain grammar on the held-out gold"
        return best, record, scores[best][1] | {"f1": scores[best][0]}
    record["reason"] = "the plain grammar scored at least as well on the held-out gold"
    return 0, record, None


def train_final(
    trees: Sequence[Tree],
    reference: Sequence[Tree],
    cycles: int,
    progress: Callable[[str], None] | None = None,
) -> Grammar:
    """The refined grammar of ``cycles`` cycles on all the trees (reference trees counted as
    plain counts, as :func:`choose` required)."""

    def report(cycle: int, iteration: int, loglik: float) -> None:
        if progress is not None:
            progress(f"refining on all gold: cycle {cycle}, EM iteration {iteration}")

    return train_refined([*trees, *reference], cycles, progress=report)
