"""k-best, posteriors and the consensus tree at the longest sentence an import accepts.

Oracle: the log-probability of each returned tree recomputed from the grammar's rule list
(a product of rule probabilities over the tree's productions), independently of the chart.
"""

from __future__ import annotations

import math

import pytest
from nltk import Tree

from parser.chart import MAX_WORDS, parse
from parser.grammar import Grammar

RULES = {
    ("S", ("S", "S")): 0.6,
    ("S", ("NP", "VP")): 0.4,
    ("NP", ("a",)): 1.0,
    ("VP", ("a",)): 0.5,
    ("VP", ("VP", "NP")): 0.5,
}
GRAMMAR_TEXT = "\n".join(
    f"{p} {lhs} -> " + (" ".join(rhs) if len(rhs) == 2 else f"'{rhs[0]}'")
    for (lhs, rhs), p in RULES.items()
)


def _logprob(tree: Tree) -> float:
    """Sum of the log-probabilities of the tree's rules, read from RULES (no wrapper labels)."""
    total = 0.0
    todo = [tree]
    while todo:
        node = todo.pop()
        rhs = tuple(c.label() if isinstance(c, Tree) else c for c in node)
        total += math.log(RULES[(node.label(), rhs)])
        todo.extend(c for c in node if isinstance(c, Tree))
    return total


def _strip_root(tree: Tree) -> Tree:
    while tree.label() not in ("S", "NP", "VP") and len(tree) == 1:
        tree = tree[0]
    return tree


@pytest.mark.slow
def test_kbest_at_the_import_limit_returns_distinct_scored_trees() -> None:
    grammar = Grammar.from_text(GRAMMAR_TEXT)
    words = ["a"] * MAX_WORDS
    assert MAX_WORDS == 250
    result = parse(grammar, words, k=2, posteriors=True)
    assert not result.fallback
    assert len(result.trees) == 2
    assert str(result.trees[0]) != str(result.trees[1])
    for tree, logprob in zip(result.trees, result.logprobs, strict=True):
        assert tree.leaves() == words
        assert math.isclose(_logprob(_strip_root(tree)), logprob, rel_tol=1e-9)
    assert result.logprobs[0] >= result.logprobs[1]
    best = parse(grammar, words, k=1)
    assert str(best.trees[0]) == str(result.trees[0])
    assert result.consensus is not None and result.consensus.leaves() == words


def test_kbest_long_sentence_keeps_the_order_of_shorter_ones() -> None:
    # the same grammar at 30 words: ten trees, best first, each scored right
    grammar = Grammar.from_text(GRAMMAR_TEXT)
    result = parse(grammar, ["a"] * 30, k=10)
    assert len(result.trees) == 10
    assert result.logprobs == sorted(result.logprobs, reverse=True)
    assert len({str(t) for t in result.trees}) == 10
    for tree, logprob in zip(result.trees, result.logprobs, strict=True):
        assert math.isclose(_logprob(_strip_root(tree)), logprob, rel_tol=1e-9)
