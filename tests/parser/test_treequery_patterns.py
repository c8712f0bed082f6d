"""Search patterns: reading (with located errors), matching fragments and word strings, and
the index giving the same answers as a plain scan."""

from __future__ import annotations

import random

import pytest

from parser.treequery import (
    Fragment,
    QuerySyntaxError,
    SearchIndex,
    WordString,
    match_tree,
    parse_pattern,
)
from parser.trees import read_tree

TREE = read_tree(
    "(ROOT (S (NP-SBJ (DT The) (NN valve)) (VP (VBD stuck) (PP (IN on) (NP (NNP Monday)))) (. .)))"
)


@pytest.mark.parametrize(
    ("pattern", "spans"),
    [
        ("(NP)", [(0, 2), (4, 5)]),
        ("(NP-SBJ)", [(0, 2)]),
        ("(NP-TMP)", []),
        ("(NN)", [(1, 2)]),
        ("(NN valve)", [(1, 2)]),
        ("(NN VALV*)", [(1, 2)]),
        ("(PP on (NP ...))", [(3, 5)]),
        ("(PP on)", []),
        ("(VP ... (PP) ...)", [(2, 5)]),
        ("(VP (PP) ...)", []),
        ("(S (NP) _ (.))", [(0, 6)]),
        ("(S (NP) _)", []),
        ("(S ... ~monday ...)", [(0, 6)]),
        ("(S ... monday ...)", []),
        ("(S ~(NNP) ...)", []),
        ("(S ... ~(NNP) ...)", [(0, 6)]),
        ("(* (DT the) ...)", [(0, 2)]),
        ("(VP|NP ...)", [(0, 2), (2, 5), (4, 5)]),
        ("(ROOT (S ...))", [(0, 6)]),
    ],
)
def test_fragment_matches_expected_spans(pattern: str, spans: list[tuple[int, int]]) -> None:
    assert match_tree(parse_pattern(pattern), TREE) == spans


@pytest.mark.parametrize(
    ("pattern", "spans"),
    [
        ("the valve", [(0, 2)]),
        ("valve *", [(1, 3)]),
        ("* *", [(0, 2), (1, 3), (2, 4), (3, 5), (4, 6)]),
        ("st*", [(2, 3)]),
        ("*day", [(4, 5)]),
        ("valve on", []),
    ],
)
def test_word_string_matches_expected_spans(pattern: str, spans: list[tuple[int, int]]) -> None:
    p = parse_pattern(pattern)
    assert isinstance(p, WordString)
    assert match_tree(p, TREE) == spans


@pytest.mark.parametrize(
    ("pattern", "column", "words"),
    [
        ("(NP", 4, "never closed"),
        (")", 1, "without a '('"),
        ("(NP))", 5, "after the fragment"),
        ("the (NP)", 5, "cannot hold brackets"),
        ("( )", 3, "label must follow"),
        ("(NP ~)", 5, "'~' needs"),
        ("a _ b", 3, "belongs in a bracketed fragment"),
        ("", 1, "empty"),
        ("(N*P)", 2, "not a label"),
        ("(NP|)", 2, "not a label"),
        ("va**e", 1, "one '*'"),
    ],
)
def test_bad_pattern_error_names_column(pattern: str, column: int, words: str) -> None:
    with pytest.raises(QuerySyntaxError) as err:
        parse_pattern(pattern)
    assert err.value.column == column
    assert words in err.value.message


def test_pattern_with_bracket_words_and_regex_characters_is_literal() -> None:
    tree = read_tree("(ROOT (S (NP (NN a.b)) (PRN (-LRB- -LRB-) (NN c+) (-RRB- -RRB-))))")
    assert match_tree(parse_pattern("a.b"), tree) == [(0, 1)]
    assert match_tree(parse_pattern("axb"), tree) == []
    assert match_tree(parse_pattern("-LRB- c+ -RRB-"), tree) == [(1, 4)]
    assert match_tree(parse_pattern("(PRN -LRB- _ -RRB-)"), tree) == [(1, 4)]


TREEBANK = [
    "(ROOT (S (NP (DT the) (NN pump)) (VP (VBD failed) (PP (IN at) (NP (NN dawn))))))",
    "(ROOT (S (NP (DT a) (NN valve)) (VP (VBD stuck))))",
    "(ROOT (NP (NP (DT the) (NN pump)) (PP (IN of) (NP (DT the) (NN ferry)))))",
    "(ROOT (S (VP (VB check) (NP (DT the) (JJ old) (NN pump)))))",
]


def _random_tree(rng: random.Random) -> str:
    return rng.choice(TREEBANK)


@pytest.mark.parametrize(
    "pattern",
    [
        "the pump",
        "the * pump",
        "pu*",
        "* *",
        "*e",
        "(NP (DT the) ...)",
        "(PP ... (NP ~the ...))",
        "(S ... (VP ...))",
        "(NN pump)",
        "(VP|PP ... ~(NN) ...)",
        "(X)",
        "(NP the pump)",
    ],
)
def test_index_agrees_with_scanning_every_tree(pattern: str, rng: random.Random) -> None:
    trees = [read_tree(_random_tree(rng)) for _ in range(40)]
    index = SearchIndex()
    for i, t in enumerate(trees):
        index.add(i, t.leaves(), t)
    p = parse_pattern(pattern)
    expected = [(i, tuple(match_tree(p, t))) for i, t in enumerate(trees) if match_tree(p, t)]
    assert [(h.key, h.spans) for h in index.search(p)] == expected
    if isinstance(p, Fragment):
        assert len(index.candidates(p)) <= len(trees)


def test_index_word_string_over_entries_without_trees() -> None:
    index = SearchIndex()
    index.add("a", ["The", "pump", "failed"])
    index.add("b", ["check", "the", "PUMP"])
    index.add("c", ["pump", "the"])
    hits = list(index.search(parse_pattern("the pump")))
    assert [(h.key, h.spans) for h in hits] == [("a", ((0, 2),)), ("b", ((1, 3),))]
    assert list(index.search(parse_pattern("(NP)"))) == []
