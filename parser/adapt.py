"""Cold start: a grammar for a new domain from a few in-domain trees and many reference trees.

What it computes
    :func:`parse_weighting` reads a weighting (:class:`parser.grammar.Weighting`) from text:
    ``5`` (in-domain trees count five times, rules and lexicon alike), ``rules=2,lexicon=8``
    or ``prior=50,lexicon=8``.

    :func:`choose_weighting` picks the weighting of a small grid (:data:`GRID`) whose grammar,
    trained on the in-domain training trees plus the reference, parses the in-domain held-out
    trees best (labelled bracket F1 of the consensus tree, words only, the tree annotators
    start from). The grid costs one count of the trees (:func:`parser.grammar.train_weighted`),
    one complete parse of the held-out trees and one parse per other point pruned by the
    first point's posteriors (:func:`parser.chart.parse_family`, about a third of a complete
    parse). With fewer than :data:`MIN_HELDOUT`
    held-out trees the choice would be noise, so :data:`DEFAULT` is used instead.

    :func:`heldout_split` holds out every n-th tree, the same rule the service applies to its
    gold (by position here, by sentence id there).

Complexity: one training count plus held-out parses (O(n^3) each): one complete and
len(grid) - 1 pruned ones per held-out tree.
Limits: the grid is small on purpose; a finer one overfits a few dozen held-out trees.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from nltk import Tree

from parser.errors import GrammarError
from parser.grammar import Grammar, Weighting, train_weighted
from parser.interval import SentenceCounts, drop_interval
from parser.scoring import score_corpus, score_pair

#: Held-out in-domain trees needed before the weighting is chosen by held-out F1.
MIN_HELDOUT = 20
#: The weighting used while there are too few held-out trees. Plain counts: on the GUM
#: interview genre with 100 in-domain trees (60 test sentences, consensus F1; other genres as
#: reference) plain counts gave 76.2, in-domain rules and lexicon x5 75.5, lexicon x3 76.0,
#: lexicon x10 76.1, rules x2 76.1, rules x3 and lexicon x20 75.8, a MAP prior of 20 74.5,
#: of 100 75.2, of 500 76.0 (reference alone 75.3): no weighting measured better than plain
#: counts, so the default adds none (bench/cold_start.py prints the full comparison).
DEFAULT = Weighting()
#: The grid :func:`choose_weighting` searches (plain counts included, so a domain that gains
#: nothing from weighting keeps plain counts): the lexicon alone, both, and a MAP prior.
GRID: tuple[Weighting, ...] = (
    Weighting(),
    Weighting(rules=1.0, lexicon=4.0),
    Weighting(rules=2.0, lexicon=2.0),
    Weighting(rules=4.0, lexicon=8.0),
    Weighting(prior=500.0, lexicon=4.0),
)


def describe(w: Weighting) -> str:
    """The text :func:`parse_weighting` reads back as ``w``."""
    if w.prior is not None:
        return f"prior={w.prior:g},lexicon={w.lexicon:g}"
    if w.rules == w.lexicon:
        return f"{w.rules:g}"
    return f"rules={w.rules:g},lexicon={w.lexicon:g}"


def parse_weighting(text: str) -> Weighting:
    """A weighting from ``N``, or ``key=value`` pairs of rules, lexicon and prior separated by
    commas; GrammarError naming the bad part otherwise."""
    raw = (text or "").strip()
    if not raw:
        raise GrammarError("empty weighting: give a number such as 5 or rules=2,lexicon=8")
    try:
        w = float(raw)
    except ValueError:
        pass
    else:
        return Weighting(rules=w, lexicon=w)
    values: dict[str, float] = {}
    for part in raw.split(","):
        key, sep, value = part.partition("=")
        key = key.strip()
        if not sep or key not in ("rules", "lexicon", "prior"):
            raise GrammarError(
                f"weighting part {part.strip()!r}: expected rules=N, lexicon=N or prior=N"
            )
        if key in values:
            raise GrammarError(f"weighting part {part.strip()!r}: {key} is given twice")
        try:
            values[key] = float(value)
        except ValueError:
            raise GrammarError(
                f"weighting part {part.strip()!r}: {value.strip()!r} is not a number"
            ) from None
    return Weighting(**values)


def heldout_split(trees: Sequence[Tree], every: int = 10) -> tuple[list[Tree], list[Tree]]:
    """(training trees, held-out trees): every ``every``-th tree (the 10th, 20th...) is held
    out."""
    train = [t for i, t in enumerate(trees, 1) if i % every]
    held = [t for i, t in enumerate(trees, 1) if not i % every]
    return train, held


def _rooted_like(gold: Tree, test: Tree) -> Tree:
    return test if test.label() == gold.label() else Tree(gold.label(), [test])


def heldout_f1(
    grammar: Grammar, held: Sequence[Tree], progress: Callable[[int, int], None] | None = None
) -> float:
    """Labelled bracket F1 (parser.scoring defaults) of the grammar's consensus trees of the
    held-out trees' words against those trees."""
    from parser.chart import parse

    pairs = []
    for i, gold in enumerate(held):
        result = parse(grammar, gold.leaves(), posteriors=True)
        pairs.append((gold, _rooted_like(gold, result.consensus or result.trees[0])))
        if progress is not None:
            progress(i + 1, len(held))
    return score_corpus(pairs).f1


def family_counts(grammars: Sequence[Grammar], held: Sequence[Tree]) -> list[list[SentenceCounts]]:
    """Per grammar of a family (one count, several weightings), the labelled (matched, gold,
    test) constituents of its consensus tree of each held-out tree's words, the later
    grammars parsed with the first one's pruning (:func:`parser.chart.parse_family`)."""
    from parser.chart import parse_family

    out: list[list[SentenceCounts]] = [[] for _ in grammars]
    for gold in held:
        for counts, result in zip(out, parse_family(grammars, gold.leaves()), strict=True):
            c = score_pair(gold, _rooted_like(gold, result.consensus or result.trees[0])).labelled
            counts.append((c.matched, c.gold, c.test))
    return out


def counts_f1(counts: Sequence[SentenceCounts]) -> float:
    """Corpus labelled F1 of per-sentence (matched, gold, test) counts (as parser.scoring)."""
    matched = sum(c[0] for c in counts)
    both = sum(c[1] + c[2] for c in counts)
    return 2.0 * matched / both if both else 0.0


@dataclass
class Choice:
    """The weighting chosen, each grid point's held-out F1 (None: the grid was not run), and
    why."""

    weighting: Weighting
    scores: list[tuple[Weighting, float]] = field(default_factory=list)
    heldout: int = 0
    reason: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {
            "weighting": describe(self.weighting),
            "reason": self.reason,
            "heldout": self.heldout,
            "grid": [{"weighting": describe(w), "f1": round(f, 5)} for w, f in self.scores],
        }


def choose_weighting(
    train: Sequence[Tree],
    held: Sequence[Tree],
    reference: Sequence[Tree],
    grid: Sequence[Weighting] = GRID,
    default: Weighting = DEFAULT,
    score: Callable[[Sequence[Grammar]], Sequence[Sequence[SentenceCounts]]] | None = None,
    **train_options: Any,
) -> Choice:
    """The grid point with the best held-out F1 (the first of equals) when it beats the first
    grid point beyond the sampling noise (the paired bootstrap interval of its gain,
    :func:`parser.interval.drop_interval`, lies above 0), else the first grid point; or
    ``default`` when there are fewer than MIN_HELDOUT held-out trees, no reference or no
    in-domain training tree (then there is nothing to weigh). The grid's grammars are scored
    together by :func:`family_counts` on ``held`` (the first grid point parsed in full, the
    others pruned by it), or by ``score(grammars)``, which returns the same per-sentence
    counts per grammar (a caller that parses elsewhere or keeps more than the counts).

    Why the noise test: a few dozen held-out trees cannot tell close weightings apart, and on
    GUM (bench/cold_start.py, 200 in-domain trees, 20 held out) the grid's best point scored
    below plain counts on the test in both genres tried (by 0.14 and 0.51 F1)."""
    if not reference:
        return Choice(Weighting(), reason="no reference trees: plain counts")
    if not train:
        return Choice(default, reason="no in-domain training trees")
    if len(held) < MIN_HELDOUT:
        return Choice(
            default,
            heldout=len(held),
            reason=f"{len(held)} held-out trees (fewer than {MIN_HELDOUT}): default",
        )
    grammars = train_weighted(train, reference=reference, weightings=grid, **train_options)
    counts = list(score(grammars) if score is not None else family_counts(grammars, held))
    if len(counts) != len(grid):
        raise GrammarError(f"{len(counts)} scores for a grid of {len(grid)} weightings")
    scores = [(w, counts_f1(c)) for w, c in zip(grid, counts, strict=True)]
    best = max(range(len(scores)), key=lambda i: (scores[i][1], -i))
    reason = f"best held-out F1 of {len(grid)} weightings on {len(held)} trees"
    if best:
        gain = drop_interval(counts[0], counts[best])
        if not gain.high < 0.0:
            reason = (
                f"{describe(grid[best])} scored best ({scores[best][1]:.4f} against "
                f"{scores[0][1]:.4f}) but within the noise of {len(held)} held-out trees "
                f"(95% paired bootstrap interval of the gain {-gain.high:.4f} to "
                f"{-gain.low:.4f}): {describe(grid[0])} kept"
            )
            best = 0
    return Choice(scores[best][0], scores, len(held), reason=reason)
