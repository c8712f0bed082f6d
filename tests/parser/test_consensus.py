"""The consensus tree (parser.consensus): exact search, constraints, and a hand-checked case."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from nltk import Tree

from parser.chart import Constraints, parse
from parser.consensus import consensus_tree
from parser.grammar import Grammar
from parser.trees import constituents

LABELS = ["NP", "VP", "PP", "S"]


def _skeletons(i: int, k: int) -> Iterator[frozenset[tuple[int, int]]]:
    """Every binary bracketing of words i..k, as its set of spans (independent oracle)."""
    if k - i == 1:
        yield frozenset({(i, k)})
        return
    for j in range(i + 1, k):
        for left in _skeletons(i, j):
            for right in _skeletons(j, k):
                yield left | right | {(i, k)}


def _objective(spans: set[tuple[str, int, int]], post: dict, cost: float) -> float:
    return sum(post.get(s, 0.0) - cost for s in spans)


@st.composite
def posterior_sets(draw: st.DrawFn) -> tuple[int, dict, float]:
    n = draw(st.integers(1, 6))
    spans = [(a, b) for a in range(n) for b in range(a + 1, n + 1)]
    post: dict[tuple[str, int, int], float] = {}
    for a, b in draw(st.lists(st.sampled_from(spans), max_size=12)):
        post[(draw(st.sampled_from(LABELS)), a, b)] = draw(st.floats(0.0, 1.0))
    return n, post, draw(st.sampled_from([0.2, 0.4, 0.5, 0.7]))


@settings(max_examples=200, deadline=None)
@given(posterior_sets())
def test_consensus_maximizes_the_objective_over_every_bracketing(problem) -> None:
    # Oracle: brute force over all binary skeletons; each span of a skeleton contributes the
    # gains of its labels worth bracketing (common practice, no source; the decoder is the
    # labelled-recall one of Goodman 1996 with a per-bracket cost).
    n, post, cost = problem
    words = [f"w{i}" for i in range(n)]
    tree = consensus_tree(
        words,
        ["T"] * n,
        [(lab, a, b, p) for (lab, a, b), p in post.items()],
        root="ROOT",
        cost=cost,
    )
    assert tree.leaves() == words and tree.label() == "ROOT"
    assert [t for _, t in tree.pos()] == ["T"] * n
    got = {c for c in constituents(tree) if c != ("ROOT", 0, n)}
    best = max(
        sum(max(0.0, p - cost) for (lab, a, b), p in post.items() if (a, b) in sk)
        for sk in _skeletons(0, n)
    )
    assert _objective(got, post, cost) == pytest.approx(best, abs=1e-12)
    # Nothing below the cost is proposed.
    assert all(post.get(c, 0.0) > cost for c in got)


@settings(max_examples=100, deadline=None)
@given(posterior_sets(), st.data())
def test_consensus_keeps_required_spans(problem, data) -> None:
    n, post, cost = problem
    spans = [(a, b) for a in range(n) for b in range(a + 1, n + 1) if (a, b) != (0, n)]
    if not spans:
        return
    a, b = data.draw(st.sampled_from(spans))
    label = data.draw(st.sampled_from(LABELS + [None]))
    # Posteriors under a constraint are zero for spans crossing it.
    post = {
        (lab, x, y): p for (lab, x, y), p in post.items() if not (x < a < y < b or a < x < b < y)
    }
    if label is None and not any((x, y) == (a, b) for _, x, y in post):
        # Under a required span the chart always gives the span some labelled posterior
        # (its node is a constituent, never a binarization node).
        post[(data.draw(st.sampled_from(LABELS)), a, b)] = data.draw(st.floats(0.01, 1.0))
    tree = consensus_tree(
        [f"w{i}" for i in range(n)],
        ["T"] * n,
        [(lab, x, y, p) for (lab, x, y), p in post.items()],
        root="ROOT",
        required=[(a, b, label)],
        cost=cost,
    )
    found = [lab for lab, x, y in constituents(tree) if (x, y) == (a, b)]
    if label is not None:
        assert label in found
    elif b - a > 1:
        # A span of several words with no label given: bracketed under some label.
        assert found


# Manning and Schütze 1999, ch. 11 (from memory): the PCFG and sentence of the PP-attachment
# example; P(NP attachment) = 0.0009072 / 0.0015876 = 4/7, P(VP attachment) = 3/7.
ASTRONOMERS = """
1.0 S -> NP VP
1.0 PP -> P NP
0.7 VP -> V NP
0.3 VP -> VP PP
1.0 P -> 'with'
1.0 V -> 'saw'
0.4 NP -> NP PP
0.1 NP -> 'astronomers'
0.18 NP -> 'ears'
0.04 NP -> 'saw'
0.18 NP -> 'stars'
0.1 NP -> 'telescopes'
"""


def test_consensus_on_the_pp_attachment_example() -> None:
    g = Grammar.from_text(ASTRONOMERS, start="S")
    words = "astronomers saw stars with ears".split()
    r = parse(g, words, k=2, posteriors=True)
    post = {(lab, a, b): p for lab, a, b, p in r.posteriors}
    assert post[("NP", 2, 5)] == pytest.approx(4 / 7, abs=1e-12)
    assert post[("VP", 1, 3)] == pytest.approx(3 / 7, abs=1e-12)
    # Cost 0.4: both attachments are worth a bracket alone; they cross, and the NP one gains
    # more (4/7 - 0.4 > 3/7 - 0.4): the consensus is the Viterbi tree.
    assert r.consensus == r.trees[0]
    # Cost 0.5: only the NP attachment clears it.
    tree = consensus_tree(words, [t for _, t in r.trees[0].pos()], r.posteriors, "S", cost=0.5)
    assert ("NP", 2, 5) in constituents(tree)
    # Cost 0.6: neither does; the PP hangs flat under the sentence's VP, which no tree of the
    # grammar has, and every bracket of probability 1 stays.
    tree = consensus_tree(words, [t for _, t in r.trees[0].pos()], r.posteriors, "S", cost=0.6)
    assert tree == Tree.fromstring(
        "(S (NP astronomers) (VP (V saw) (NP stars) (PP (P with) (NP ears))))"
    )


def test_consensus_honours_constraints() -> None:
    g = Grammar.from_text(ASTRONOMERS, start="S")
    words = "astronomers saw stars with ears".split()
    r = parse(g, words, posteriors=True, constraints=Constraints(required=[(1, 3, "VP")]))
    assert ("VP", 1, 3) in constituents(r.consensus)
    r = parse(g, words, posteriors=True, constraints=Constraints(forbidden=[(2, 5)]))
    assert ("NP", 2, 5) not in constituents(r.consensus)
    assert ("VP", 1, 3) in constituents(r.consensus)


def test_no_consensus_without_posteriors_or_for_a_fallback() -> None:
    g = Grammar.from_text(ASTRONOMERS, start="S")
    assert parse(g, "astronomers saw stars".split()).consensus is None
    assert parse(g, "stars stars".split(), posteriors=True).consensus is None
