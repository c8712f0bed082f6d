"""The worked PCFG example of Manning and Schuetze 1999, ch. 11 (from memory)."""

from __future__ import annotations

import math
from pathlib import Path

import pytest
from nltk import Tree

from parser.chart import Constraints, inside_logprob, parse
from parser.grammar import Grammar

DATA = Path(__file__).resolve().parent.parent / "data"
WORDS = "astronomers saw stars with ears".split()


@pytest.fixture(scope="module")
def grammar() -> Grammar:
    return Grammar.from_text((DATA / "astronomers.pcfg").read_text())


@pytest.mark.external
def test_chart_astronomers_two_best_and_inside(grammar: Grammar) -> None:
    # Manning and Schuetze 1999, Foundations of Statistical NLP, ch. 11 (from memory):
    # t1 (PP attached to the noun) 0.0009072, t2 (to the verb) 0.0006804, P(w) = 0.0015876.
    r = parse(grammar, WORDS, k=2, posteriors=True)
    assert [math.exp(x) for x in r.logprobs] == pytest.approx([0.0009072, 0.0006804], rel=1e-12)
    assert r.trees[0] == Tree.fromstring(
        "(S (NP astronomers) (VP (V saw) (NP (NP stars) (PP (P with) (NP ears)))))"
    )
    assert r.trees[1] == Tree.fromstring(
        "(S (NP astronomers) (VP (VP (V saw) (NP stars)) (PP (P with) (NP ears))))"
    )
    assert r.inside_logprob is not None
    assert math.exp(r.inside_logprob) == pytest.approx(0.0015876, rel=1e-12)
    assert math.exp(inside_logprob(grammar, WORDS)) == pytest.approx(0.0015876, rel=1e-12)
    assert not r.fallback


def test_chart_astronomers_exactly_two_trees_and_posteriors(grammar: Grammar) -> None:
    r = parse(grammar, WORDS, k=10, posteriors=True, posterior_threshold=0.0)
    assert len(r.trees) == 2
    post = {(lab, a, b): p for lab, a, b, p in r.posteriors}
    # P(NP over "stars with ears") = 0.0009072 / 0.0015876 = 4/7; the VP over "saw stars" 3/7.
    assert post[("NP", 2, 5)] == pytest.approx(4 / 7, abs=1e-12)
    assert post[("VP", 1, 3)] == pytest.approx(3 / 7, abs=1e-12)
    assert post[("S", 0, 5)] == pytest.approx(1.0, abs=1e-12)


def test_chart_astronomers_constraints_select_one_reading(grammar: Grammar) -> None:
    verb = Constraints(required=[(1, 3, "VP")])
    r = parse(grammar, WORDS, k=5, posteriors=True, constraints=verb)
    assert len(r.trees) == 1
    assert math.exp(r.logprobs[0]) == pytest.approx(0.0006804, rel=1e-12)
    assert r.inside_logprob is not None
    assert math.exp(r.inside_logprob) == pytest.approx(0.0006804, rel=1e-12)
    noun = Constraints(forbidden=[(1, 3)])
    r = parse(grammar, WORDS, k=5, constraints=noun)
    assert [math.exp(x) for x in r.logprobs] == pytest.approx([0.0009072], rel=1e-12)


def test_chart_astronomers_unknown_word_falls_back(grammar: Grammar) -> None:
    r = parse(grammar, "astronomers saw comets".split(), k=3, posteriors=True)
    assert r.fallback
    assert r.trees[0].leaves() == ["astronomers", "saw", "comets"]
    assert r.trees[0].label() == "S"
    assert r.posteriors == [] and r.inside_logprob is None
