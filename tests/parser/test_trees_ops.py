"""Small tree operations: words, tags, function tags, empty elements, spans, building trees."""

from __future__ import annotations

import pytest
from nltk import Tree

from parser.trees import (
    UNKNOWN_TAG,
    TreeError,
    constituents,
    drop_empty_elements,
    flat_tree,
    is_preterminal,
    pos_tags,
    read_tree,
    strip_function_tags,
    strip_label,
    tree_from_spans,
    words,
    write_tree,
)

PTB = (
    "( (S (NP-SBJ-1 (DT The) (NN dog)) (VP (VBD was) (VP (VBN seen) (NP (-NONE- *-1)) "
    "(PP-LOC=2 (IN in) (NP (DT the) (NN park))))) (. .)) )"
)


def test_words_and_pos_tags_in_order():
    tree = read_tree(PTB)
    assert words(tree) == ["The", "dog", "was", "seen", "*-1", "in", "the", "park", "."]
    assert pos_tags(tree) == ["DT", "NN", "VBD", "VBN", "-NONE-", "IN", "DT", "NN", "."]


def test_is_preterminal():
    assert is_preterminal(Tree("NN", ["dog"]))
    assert not is_preterminal(Tree("NP", [Tree("NN", ["dog"])]))
    assert not is_preterminal("dog")


@pytest.mark.parametrize(
    "label, stripped",
    [
        ("NP-SBJ-1", "NP"),
        ("NP=2", "NP"),
        ("PP-LOC-PRD", "PP"),
        ("S", "S"),
        ("PRP$", "PRP$"),
        ("-NONE-", "-NONE-"),
        ("-LRB-", "-LRB-"),
        ("", ""),
        ("NP-", "NP"),
    ],
)
def test_strip_label(label, stripped):
    assert strip_label(label) == stripped


def test_strip_function_tags_returns_a_new_tree():
    tree = read_tree(PTB)
    before = write_tree(tree)
    stripped = strip_function_tags(tree)
    assert write_tree(stripped) == (
        "( (S (NP (DT The) (NN dog)) (VP (VBD was) (VP (VBN seen) (NP (-NONE- *-1)) "
        "(PP (IN in) (NP (DT the) (NN park))))) (. .)))"
    )
    assert write_tree(tree) == before


def test_drop_empty_elements_removes_traces_and_emptied_nodes():
    tree = read_tree(PTB)
    dropped = drop_empty_elements(tree)
    assert write_tree(dropped) == (
        "( (S (NP-SBJ-1 (DT The) (NN dog)) (VP (VBD was) (VP (VBN seen) "
        "(PP-LOC=2 (IN in) (NP (DT the) (NN park))))) (. .)))"
    )
    assert "*-1" in words(tree)  # the input is untouched
    assert drop_empty_elements(read_tree("(S (NP (-NONE- *)) (VP (-NONE- *T*)))")) is None


def test_constituents_are_phrasal_spans_in_preorder():
    tree = read_tree("(ROOT (S (NP (DT the) (NN dog)) (VP (VBD barked)) (. .)))")
    # words: the0 dog1 barked2 .3
    assert constituents(tree) == [("ROOT", 0, 4), ("S", 0, 4), ("NP", 0, 2), ("VP", 2, 3)]
    assert constituents(Tree("NN", ["x"])) == []


def test_flat_tree_defaults():
    tree = flat_tree(["a", "b"])
    assert write_tree(tree) == f"(ROOT (S ({UNKNOWN_TAG} a) ({UNKNOWN_TAG} b)))"
    assert write_tree(flat_tree(["a"], ["DT"], root=None, phrase="FRAG")) == "(FRAG (DT a))"
    with pytest.raises(TreeError):
        flat_tree([])
    with pytest.raises(TreeError):
        flat_tree(["a", "b"], ["DT"])


def test_tree_from_spans_builds_nested_tree():
    tree = tree_from_spans(
        ["the", "dog", "barked", "."],
        ["DT", "NN", "VBD", "."],
        [("VP", 2, 3), ("S", 0, 4), ("NP", 0, 2)],
    )
    assert write_tree(tree) == "(ROOT (S (NP (DT the) (NN dog)) (VP (VBD barked)) (. .)))"


def test_tree_from_spans_equal_spans_make_a_unary_chain_first_on_top():
    tree = tree_from_spans(["go"], ["VB"], [("S", 0, 1), ("VP", 0, 1)], root=None)
    assert write_tree(tree) == "(S (VP (VB go)))"


def test_tree_from_spans_inverts_constituents():
    tree = read_tree(PTB)
    assert tree_from_spans(words(tree), pos_tags(tree), constituents(tree), root=None) == tree


def test_tree_from_spans_rejects_crossing_and_bad_spans():
    ws = ["a", "b", "c"]
    with pytest.raises(TreeError, match="crosses"):
        tree_from_spans(ws, None, [("X", 0, 2), ("Y", 1, 3)])
    with pytest.raises(TreeError, match="empty or outside"):
        tree_from_spans(ws, None, [("X", 2, 2)])
    with pytest.raises(TreeError, match="empty or outside"):
        tree_from_spans(ws, None, [("X", 1, 4)])
    with pytest.raises(TreeError, match="cover all"):
        tree_from_spans(ws, None, [("X", 0, 2)], root=None)
