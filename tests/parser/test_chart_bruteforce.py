"""Chart results against brute-force enumeration of every tree of random tiny grammars.

Oracle: enumerate all derivations of a plain PCFG (binary, unary and lexical rules; acyclic
unaries) straight from its rule list, independently of the chart's top/bottom model; the
max-rule-product tree from the derivations' anchored rules.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from nltk import Tree

from parser.chart import Constraints, parse
from parser.grammar import Grammar

NONTERMINALS = ["S", "A", "B", "C"]
TERMINALS = ["a", "b"]


@st.composite
def grammars(draw: st.DrawFn) -> dict:
    """Random rules; unary X -> Y only from a lower to a higher index (no cycles). Most
    symbols emit most terminals, so most sentences have many trees."""
    table = []
    binaries = [(y, z) for y in NONTERMINALS for z in NONTERMINALS]
    for x, lhs in enumerate(NONTERMINALS):
        chosen: list[tuple[tuple[str, ...], bool]] = []
        chosen += [
            (rhs, False)
            for rhs in draw(
                st.lists(
                    st.sampled_from(binaries), min_size=1 if x == 0 else 0, max_size=4, unique=True
                )
            )
        ]
        if x + 1 < len(NONTERMINALS):
            chosen += [
                ((y,), False)
                for y in draw(
                    st.lists(st.sampled_from(NONTERMINALS[x + 1 :]), max_size=2, unique=True)
                )
            ]
        chosen += [((t,), True) for t in TERMINALS if draw(st.integers(0, 9)) < 7]
        if not chosen:
            chosen = [((TERMINALS[0],), True)]
        weights = draw(st.lists(st.floats(0.05, 1.0), min_size=len(chosen), max_size=len(chosen)))
        total = sum(weights)
        for (rhs, term), w in zip(chosen, weights, strict=True):
            table.append((lhs, rhs, term, w / total))
    return {"rules": table}


def _text(table: list) -> str:
    lines = []
    for lhs, rhs, term, p in table:
        right = f"'{rhs[0]}'" if term else " ".join(rhs)
        lines.append(f"{p!r} {lhs} -> {right}")
    return "\n".join(lines) + "\n"


def _enumerate(
    table: list, sym: str, words: list[str], i: int, k: int
) -> Iterator[tuple[Tree, float]]:
    for lhs, rhs, term, p in table:
        if lhs != sym:
            continue
        if term:
            if k - i == 1 and words[i] == rhs[0]:
                yield Tree(sym, [words[i]]), p
        elif len(rhs) == 1:
            for t, q in _enumerate(table, rhs[0], words, i, k):
                yield Tree(sym, [t]), p * q
        else:
            for j in range(i + 1, k):
                for tl, ql in _enumerate(table, rhs[0], words, i, j):
                    for tr, qr in _enumerate(table, rhs[1], words, j, k):
                        yield Tree(sym, [tl, tr]), p * ql * qr


def _nodes(t: Tree, start: int = 0) -> tuple[list[tuple[str, int, int, bool]], int]:
    """(label, start, end, is_preterminal) of every node; returns also the end."""
    if isinstance(t[0], str):
        return [(t.label(), start, start + 1, True)], start + 1
    out: list[tuple[str, int, int, bool]] = []
    end = start
    for c in t:
        sub, end = _nodes(c, end)
        out.extend(sub)
    out.append((t.label(), start, end, False))
    return out, end


def anchored_rules(tree: Tree, start: int = 0) -> tuple[list[tuple], int]:
    """The anchored rules of a derivation as the max-rule decoder scores them: each top's
    unary chain (labels top first) over its span, each bottom's binary rule with its split
    point, each word's preterminal; returns also the end."""
    chain = [tree.label()]
    node = tree
    while len(node) == 1 and not isinstance(node[0], str):
        node = node[0]
        chain.append(node.label())
    if isinstance(node[0], str):
        return [(tuple(chain), start, start + 1), (node.label(), start)], start + 1
    left, mid = anchored_rules(node[0], start)
    right, end = anchored_rules(node[1], mid)
    rule = (node.label(), node[0].label(), node[1].label(), start, mid, end)
    return [(tuple(chain), start, end), rule, *left, *right], end


def max_rule_product(derivations: list[Tree], probs: Sequence[float]) -> Tree | None:
    """Max-rule-product by enumeration (Petrov and Klein 2007, "Improved inference for
    unlexicalized parsing", NAACL, section 3; from memory): the derivation maximizing the
    product of its anchored rules' posteriors; None when the best two tie."""
    z = sum(probs)
    posterior: dict[tuple, float] = {}
    rules = [anchored_rules(t)[0] for t in derivations]
    for anchored, p in zip(rules, probs, strict=True):
        for r in set(anchored):
            posterior[r] = posterior.get(r, 0.0) + p / z
    scores = [sum(math.log(posterior[r]) for r in anchored) for anchored in rules]
    order = sorted(range(len(scores)), key=lambda x: -scores[x])
    if len(order) > 1 and scores[order[0]] < scores[order[1]] + 1e-9:
        return None
    return derivations[order[0]]


def _satisfies(t: Tree, c: Constraints) -> bool:
    nodes, _ = _nodes(t)
    for a, b, lab in c.required:
        if lab is None:
            if not any((x, y) == (a, b) for _, x, y, _ in nodes):
                return False
        elif not any((x, y) == (a, b) and n == lab and not pre for n, x, y, pre in nodes):
            return False
    for a, b in c.forbidden:
        if any((x, y) == (a, b) and not pre for _, x, y, pre in nodes):
            return False
    for i, tag in enumerate(c.tags):
        if tag is not None and t.pos()[i][1] != tag:
            return False
    return True


@st.composite
def problems(draw: st.DrawFn) -> tuple[dict, list[str], Constraints]:
    g = draw(grammars())
    n = draw(st.integers(1, 4))
    words = draw(st.lists(st.sampled_from(TERMINALS), min_size=n, max_size=n))
    spans = [(a, b) for a in range(n) for b in range(a + 1, n + 1)]
    required: list[tuple[int, int, str | None]] = []
    if draw(st.booleans()):
        for a, b in draw(st.lists(st.sampled_from(spans), max_size=2, unique=True)):
            if any(x < a < y < b or a < x < b < y for x, y, _ in required):
                continue
            required.append((a, b, draw(st.sampled_from(NONTERMINALS + [None]))))
    forbidden: list[tuple[int, int]] = []
    if draw(st.booleans()):
        taken = {(a, b) for a, b, _ in required}
        forbidden = [
            s
            for s in draw(st.lists(st.sampled_from(spans), max_size=2, unique=True))
            if s != (0, n) and s not in taken
        ]
    tags: list[str | None] = []
    if draw(st.booleans()):
        tags = draw(st.lists(st.sampled_from(NONTERMINALS + [None]), min_size=n, max_size=n))
    return g, words, Constraints(required=required, forbidden=forbidden, tags=tags)


def _check(table: list, words: list[str], c: Constraints | None) -> None:
    g = Grammar.from_text(_text(table), start="S")
    every = list(_enumerate(table, "S", words, 0, len(words)))
    if c is not None:
        every = [(t, p) for t, p in every if _satisfies(t, c)]
    k = 6
    r = parse(g, words, k=k, posteriors=True, constraints=c, posterior_threshold=0.0, max_rule=True)
    if not every:
        assert r.fallback
        assert r.trees[0].leaves() == words
        if c is not None:
            assert _satisfies_shape(r.trees[0], c)
        return
    assert not r.fallback
    z = sum(p for _, p in every)
    assert r.inside_logprob is not None
    assert math.isclose(r.inside_logprob, math.log(z), rel_tol=0, abs_tol=1e-9)
    # k-best: the same scores as the k best enumerated trees, each tree scored correctly.
    ranked = sorted((p for _, p in every), reverse=True)[:k]
    assert len(r.trees) == len(ranked)
    for got, want in zip(r.logprobs, ranked, strict=True):
        assert math.isclose(got, math.log(want), rel_tol=0, abs_tol=1e-9)
    prob_of = {str(t): p for t, p in every}
    assert len({str(t) for t in r.trees}) == len(r.trees)
    for t, lp in zip(r.trees, r.logprobs, strict=True):
        assert math.isclose(math.log(prob_of[str(t)]), lp, rel_tol=0, abs_tol=1e-9)
    # Posteriors: P(some non-preterminal node with this label spans these words).
    want_post: dict[tuple[str, int, int], float] = {}
    for t, p in every:
        nodes, _ = _nodes(t)
        for key in {(n, a, b) for n, a, b, pre in nodes if not pre}:
            want_post[key] = want_post.get(key, 0.0) + p / z
    got_post = {(lab, a, b): p for lab, a, b, p in r.posteriors}
    for key in set(want_post) | set(got_post):
        assert abs(got_post.get(key, 0.0) - want_post.get(key, 0.0)) < 1e-9, key
    # The max-rule-product tree, unless two derivations tie for it.
    best = max_rule_product([t for t, _ in every], [p for _, p in every])
    if best is not None:
        assert str(r.max_rule) == str(best)
    # The consensus tree keeps the words, the constraints and only brackets worth their cost.
    assert r.consensus is not None and r.consensus.leaves() == words
    if c is not None:
        assert _satisfies_shape(r.consensus, c)
        cnodes, _ = _nodes(r.consensus)
        for a, b in c.forbidden:
            assert not any((x, y) == (a, b) and not pre for _, x, y, pre in cnodes)


def _satisfies_shape(t: Tree, c: Constraints) -> bool:
    """The fallback keeps required spans (with their labels, when the label is given) and
    fixed tags."""
    nodes, _ = _nodes(t)
    for a, b, lab in c.required:
        if not any((x, y) == (a, b) and (lab is None or n == lab) for n, x, y, _ in nodes):
            return False
    return all(tag is None or t.pos()[i][1] == tag for i, tag in enumerate(c.tags))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(grammars(), st.lists(st.sampled_from(TERMINALS), min_size=1, max_size=4))
def test_chart_bruteforce_unconstrained(g: dict, words: list[str]) -> None:
    _check(g["rules"], words, None)


@pytest.mark.slow
@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(problems())
def test_chart_bruteforce_constrained(problem: tuple[dict, list[str], Constraints]) -> None:
    g, words, c = problem
    _check(g["rules"], words, c)
