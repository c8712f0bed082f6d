"""Writing trees: one-line and indented layouts, bracket escaping, refusal of unwritable trees."""

from __future__ import annotations

import pytest
from nltk import Tree

from parser.trees import (
    TreeError,
    escape_word,
    read_tree,
    read_trees,
    unescape_word,
    write_tree,
    write_trees,
)

SIMPLE = "(S (NP (DT the) (NN dog)) (VP (VBD barked)))"


def test_write_tree_one_line_is_the_canonical_spacing():
    messy = "(S\n  (NP (DT the)   (NN dog))\n\t(VP (VBD barked)))"
    assert write_tree(read_tree(messy)) == SIMPLE


def test_write_tree_indented_breaks_only_nodes_too_wide():
    tree = read_tree(SIMPLE)
    assert write_tree(tree, indent=True) == SIMPLE  # 45 characters fit in 70
    assert write_tree(tree, indent=True, width=30) == (
        "(S\n  (NP (DT the) (NN dog))\n  (VP (VBD barked)))"
    )
    assert write_tree(tree, indent=True, width=13) == (
        "(S\n  (NP\n    (DT the)\n    (NN dog))\n  (VP\n    (VBD\n      barked)))"
    )


def test_write_tree_indented_matches_nltk_pformat():
    tree = read_tree(
        "( (S (NP (NNP Durham) (NNP University)) (, ,) (NP (NNP United) "
        "(NNP Kingdom)) (VP (VBD said) (SBAR (S (NP (PRP it)) (VP (VBD won)))))))"
    )
    assert write_tree(tree, indent=True) == tree.pformat()
    assert write_tree(tree, indent=True, width=40) == tree.pformat(margin=40)


def test_write_tree_keeps_empty_root_label_as_wrapper():
    tree = Tree("", [read_tree(SIMPLE)])
    assert write_tree(tree) == "( " + SIMPLE + ")"
    assert read_tree(write_tree(tree)) == tree


def test_write_trees_one_per_line_or_blank_line_separated():
    trees = read_trees("(A (B x)) (C (D y))")
    assert write_trees(trees) == "(A (B x))\n(C (D y))\n"
    assert write_trees(trees, indent=True) == "(A (B x))\n\n(C (D y))\n"
    assert write_trees([]) == ""


def test_write_tree_spells_round_brackets_as_ptb_tokens():
    tree = Tree(
        "S",
        [
            Tree("-LRB-", ["("]),
            Tree("NN", ["f(x)"]),
            Tree("-RRB-", [")"]),
            Tree("-LRB-", ["["]),
            Tree("-LRB-", ["{"]),
        ],
    )
    assert write_tree(tree) == (
        "(S (-LRB- -LRB-) (NN f-LRB-x-RRB-) (-RRB- -RRB-) (-LRB- [) (-LRB- {))"
    )
    assert write_tree(tree, all_brackets=True) == (
        "(S (-LRB- -LRB-) (NN f-LRB-x-RRB-) (-RRB- -RRB-) (-LRB- -LSB-) (-LRB- -LCB-))"
    )
    # the stored form reads back as it is
    assert read_tree(write_tree(tree)).leaves() == ["-LRB-", "f-LRB-x-RRB-", "-RRB-", "[", "{"]


def test_escape_and_unescape_word():
    assert escape_word("(") == "-LRB-"
    assert escape_word("[x]") == "[x]"
    assert escape_word("[x]", all_brackets=True) == "-LSB-x-RSB-"
    assert unescape_word("-LCB-a-RCB- -LRB-") == "{a} ("


@pytest.mark.parametrize(
    "tree, why",
    [
        (Tree("S", []), "no children"),
        (Tree("S", [Tree("NN", ["a b"])]), "whitespace"),
        (Tree("S", [Tree("N N", ["a"])]), "whitespace"),
        (Tree("S", [Tree("NN", [""])]), "empty word"),
        (Tree("S", [Tree("", ["a"])]), "empty label"),
        (Tree("S", ["dog", Tree("NN", ["cat"])]), "mixes words and subtrees"),
        (Tree("NN", ["cat", "dog"]), "mixes words and subtrees"),
        (Tree("S", [Tree("NN", [3])]), "not a string"),
    ],
)
def test_write_tree_refuses_what_could_not_be_read_back(tree, why):
    with pytest.raises(TreeError, match=why):
        write_tree(tree)
    with pytest.raises(TreeError):
        write_tree(tree, indent=True)
