"""Parsing real sentences with the GUM-trained grammar: output shape, constraints, fallback,
k-best order, batch parsing."""

from __future__ import annotations

import math

import pytest
from nltk import Tree

from parser.batch import parse_many
from parser.chart import Constraints, parse
from parser.errors import ConstraintError, ParserError
from parser.grammar import Grammar
from parser.trees import constituents
from tests.parser.gum_grammar import full_grammar

SENTENCE = "The committee approved the new budget for the harbour on Tuesday .".split()


@pytest.fixture(scope="module")
def grammar() -> Grammar:
    return full_grammar()


def _spans(t: Tree) -> set[tuple[str, int, int]]:
    return set(constituents(t))


def test_chart_gum_best_tree_is_clean_and_kbest_is_ordered(grammar: Grammar) -> None:
    r = parse(grammar, SENTENCE, k=10, posteriors=True)
    assert not r.fallback
    assert len(r.trees) == 10
    assert all(t.leaves() == SENTENCE for t in r.trees)
    assert all(t.label() == "ROOT" for t in r.trees)
    assert r.logprobs == sorted(r.logprobs, reverse=True)
    assert len({str(t) for t in r.trees}) == 10
    one = parse(grammar, SENTENCE)
    assert one.trees[0] == r.trees[0]
    assert one.logprobs[0] == pytest.approx(r.logprobs[0], abs=1e-9)
    labels = {lab for t in r.trees for lab, _, _ in constituents(t)}
    assert labels <= set(grammar.labels)
    assert all("^" not in lab and not lab.startswith("@") for lab in labels)
    assert r.inside_logprob is not None and r.inside_logprob >= r.logprobs[0]
    assert all(0.0 < p <= 1.0 for _, _, _, p in r.posteriors)
    post = {(lab, a, b): p for lab, a, b, p in r.posteriors}
    assert post[("ROOT", 0, len(SENTENCE))] == pytest.approx(1.0)


def test_chart_gum_required_forbidden_and_tags_are_kept(grammar: Grammar) -> None:
    base = parse(grammar, SENTENCE).trees[0]
    c = Constraints(
        required=[(3, 9, "NP"), (1, 2, None)],
        forbidden=[(4, 6)],
        tags=[None, "NN", None, None, None, None, None, None, None, "NNP", None, None],
    )
    r = parse(grammar, SENTENCE, k=5, posteriors=True, constraints=c)
    assert not r.fallback
    for t in r.trees:
        spans = _spans(t)
        assert ("NP", 3, 9) in spans
        assert not any((a, b) == (4, 6) for _, a, b in spans)
        assert t.pos()[1][1] == "NN" and t.pos()[9][1] == "NNP"
    post = {(lab, a, b): p for lab, a, b, p in r.posteriors}
    assert post[("NP", 3, 9)] == pytest.approx(1.0, abs=1e-9)
    assert not any((a, b) == (4, 6) for _, a, b, _ in r.posteriors)
    assert r.logprobs[0] <= parse(grammar, SENTENCE).logprobs[0]
    assert base.leaves() == r.trees[0].leaves()


def test_chart_gum_unsatisfiable_constraints_fall_back(grammar: Grammar) -> None:
    c = Constraints(required=[(0, 2, "NOSUCHLABEL"), (5, 8, None)], tags=["DT"] + [None] * 11)
    r = parse(grammar, SENTENCE, k=3, posteriors=True, constraints=c)
    assert r.fallback
    t = r.trees[0]
    assert t.leaves() == SENTENCE and t.label() == "ROOT"
    spans = _spans(t)
    assert ("NOSUCHLABEL", 0, 2) in spans
    assert any((a, b) == (5, 8) for _, a, b in spans)
    assert t.pos()[0][1] == "DT"
    assert r.logprobs == [-math.inf] and r.posteriors == []
    r = parse(grammar, ["glorp"], constraints=Constraints(tags=["NOTATAG"]))
    assert r.fallback and r.trees[0].pos() == [("glorp", "NOTATAG")]


@pytest.mark.parametrize(
    "c,message",
    [
        (Constraints(required=[(0, 3, None), (2, 5, None)]), "cross"),
        (Constraints(required=[(0, 30, None)]), "outside"),
        (Constraints(forbidden=[(0, 12)]), "whole sentence"),
        (Constraints(required=[(2, 4, "NP")], forbidden=[(2, 4)]), "both"),
        (Constraints(tags=["NN"]), "tags"),
    ],
)
def test_chart_gum_malformed_constraints_raise(
    grammar: Grammar, c: Constraints, message: str
) -> None:
    with pytest.raises(ConstraintError, match=message):
        parse(grammar, SENTENCE, constraints=c)


def test_chart_gum_odd_words_never_raise(grammar: Grammar) -> None:
    odd = ["Zxqv-99", "(", "ÆØÅ", "http://x.y/z", "...", "1,234.5", "'s", "—", ")", "HELLO"]
    r = parse(grammar, odd, k=3, posteriors=True)
    assert r.trees[0].leaves() == odd
    for n in (1, 2):
        assert parse(grammar, odd[:n]).trees[0].leaves() == odd[:n]
    with pytest.raises(ParserError):
        parse(grammar, [])


def test_chart_gum_batch_equals_one_by_one(grammar: Grammar) -> None:
    sentences = [SENTENCE, SENTENCE[:5], "It works .".split()] * 12
    seen: list[int] = []
    batch = parse_many(
        grammar,
        sentences,
        k=2,
        processes=2,
        chunk=8,
        progress=lambda done, total: seen.append(done),
    )
    assert seen[-1] == len(sentences)
    for words, r in zip(sentences, batch, strict=True):
        one = parse(grammar, words, k=2)
        assert [str(t) for t in r.trees] == [str(t) for t in one.trees]
        assert r.logprobs == pytest.approx(one.logprobs, abs=1e-12)
