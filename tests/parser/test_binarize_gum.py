"""Binarization and its exact undo: unit cases and every shared GUM tree."""

from __future__ import annotations

import pytest
from nltk import Tree

from parser.binarize import base_label, binarize, clean_tree, rare_labels, unbinarize
from parser.errors import GrammarError
from tests.parser.gum_grammar import gum_trees


def _max_children(t: Tree) -> int:
    if isinstance(t[0], str):
        return 1
    return max([len(t)] + [_max_children(c) for c in t])


def test_binarize_clean_strips_function_tags_and_empty_elements() -> None:
    t = Tree.fromstring(
        "(ROOT (S (NP-SBJ-1 (-NONE- *T*)) (NP=2 (PRP it)) (VP (VBZ is)) (-LRB- -LRB-)))"
    )
    assert clean_tree(t) == Tree.fromstring("(ROOT (S (NP (PRP it)) (VP (VBZ is)) (-LRB- -LRB-)))")


def test_binarize_parent_annotation_and_markovization_shapes() -> None:
    t = Tree.fromstring("(ROOT (S (NP (DT a) (JJ b) (JJ c) (NN d)) (VP (VB e))))")
    b = binarize(t, horizontal=1, vertical=2)
    assert b.label() == "ROOT"
    assert b[0].label() == "S^ROOT"
    np_node = b[0][0]
    assert np_node.label() == "NP^S"
    assert np_node[1].label() == "@NP^S|DT"
    assert np_node[1][1].label() == "@NP^S|JJ"
    b0 = binarize(t, horizontal=0, vertical=1)
    assert b0[0][0][1].label() == "@NP|"
    b2 = binarize(t, horizontal=None, vertical=3)
    assert b2[0][0].label() == "NP^S^ROOT"
    assert b2[0][0][1][1].label() == "@NP^S^ROOT|DT,JJ"
    for tree in (b, b0, b2):
        assert _max_children(tree) <= 2
        assert unbinarize(tree) == t


def test_binarize_rare_labels_fall_back_one_order() -> None:
    # Variable-order markovization (the variable-history models of Klein and Manning 2003;
    # from memory): a rare label is replaced by the label one order lower; the features stay,
    # and the undo is still exact.
    t = Tree.fromstring("(ROOT (S (NP (DT a) (JJ b) (JJ c) (NN d)) (VP (VB e))))")
    rare = {"NP^S", "@NP|DT,JJ", "VB^VP"}
    b = binarize(
        t,
        horizontal=2,
        vertical=2,
        tag_ancestors=1,
        plain_intermediates=True,
        rare=rare.__contains__,
    )
    assert b[0].label() == "S^ROOT"
    np_node = b[0][0]
    assert np_node.label() == "NP"
    assert np_node[1].label() == "@NP|DT"
    assert np_node[1][1].label() == "@NP|JJ"
    assert np_node[0].label() == "DT^NP"
    assert b[0][1][0].label() == "VB"
    assert unbinarize(b) == t
    full = binarize(t, horizontal=2, vertical=2, tag_ancestors=1, plain_intermediates=True)
    assert full[0][0][1][1].label() == "@NP|DT,JJ"


def test_binarize_rare_labels_counts_every_node() -> None:
    trees = [
        Tree.fromstring("(S (NP (NN a)) (VP (VB b)))"),
        Tree.fromstring("(S (NP (NN c)) (NP (NN d)))"),
    ]
    rare = rare_labels(trees, 3)
    assert rare("VP") and rare("S") and rare("unseen")
    assert not rare("NP") and not rare("NN")


def test_binarize_reserved_characters_in_labels_are_refused() -> None:
    with pytest.raises(GrammarError, match="reserved"):
        binarize(Tree.fromstring("(ROOT (N^P (NN a)))"))


def test_binarize_base_label() -> None:
    assert base_label("NP^S^ROOT~x") == "NP"
    assert base_label("-LRB-^NP") == "-LRB-"


@pytest.mark.external
@pytest.mark.parametrize(
    "h,v,ta,heads",
    [
        (1, 2, 0, False),
        (0, 1, 0, False),
        (2, 3, 1, False),
        (None, 2, 0, False),
        (1, 2, 1, True),
        (None, 1, 0, True),
    ],
)
def test_binarize_undo_exact_on_every_gum_tree(h: int | None, v: int, ta: int, heads: bool) -> None:
    # Open data set: GUM (Zeldes 2017), every shared tree.
    trees = gum_trees()
    assert len(trees) > 3500
    for t in trees:
        cleaned = clean_tree(t)
        b = binarize(cleaned, horizontal=h, vertical=v, tag_ancestors=ta, head_outward=heads)
        assert _max_children(b) <= 2
        assert unbinarize(b) == cleaned


@pytest.mark.external
@pytest.mark.parametrize("heads", [False, True])
def test_binarize_undo_exact_with_rare_labels_backed_off(heads: bool) -> None:
    # Open data set: GUM (Zeldes 2017), every shared tree, with the labels seen fewer than
    # five times backed off one order.
    cleaned = [clean_tree(t) for t in gum_trees()]
    settings = {
        "horizontal": 2,
        "vertical": 3,
        "tag_ancestors": 1,
        "head_outward": heads,
        "plain_intermediates": True,
    }
    rare = rare_labels((binarize(c, **settings) for c in cleaned), 5)
    changed = 0
    for c in cleaned:
        b = binarize(c, rare=rare, **settings)
        changed += b != binarize(c, **settings)
        assert _max_children(b) <= 2
        assert unbinarize(b) == c
    assert changed > 100


def test_head_outward_factoring_of_one_phrase() -> None:
    # Common practice, no source: an NP headed by its last noun takes its left siblings
    # nearest first; each intermediate node names the head and the sibling attached last.
    t = Tree.fromstring("(NP (DT the) (JJ big) (JJ red) (NN dog) (PP (IN of) (NP (NN x))))")
    b = binarize(t, horizontal=1, vertical=1, head_outward=True)
    assert b == Tree.fromstring(
        "(NP (DT the) (@NP|NN:JJ (JJ big) (@NP|NN:JJ (JJ red) (@NP|NN:PP (NN dog)"
        " (PP (IN of) (NP (NN x)))))))"
    )
    assert unbinarize(b) == t


@pytest.mark.external
@pytest.mark.parametrize("heads", [False, True])
def test_plain_intermediates_undo_exact_on_every_gum_tree(heads: bool) -> None:
    # Open data set: GUM (Zeldes 2017), every shared tree.
    for t in gum_trees():
        cleaned = clean_tree(t)
        b = binarize(
            cleaned,
            horizontal=2,
            vertical=2,
            tag_ancestors=1,
            head_outward=heads,
            plain_intermediates=True,
        )
        assert _max_children(b) <= 2
        assert unbinarize(b) == cleaned


def test_plain_intermediates_name_the_plain_parent() -> None:
    # Common practice, no source: the phrase keeps its parent annotation, the nodes inside
    # it do not.
    t = Tree.fromstring("(ROOT (S (NP (DT the) (JJ big) (NN dog)) (VP (VBD ran))))")
    b = binarize(t, horizontal=1, vertical=2, plain_intermediates=True)
    assert b[0][0] == Tree.fromstring("(NP^S (DT the) (@NP|DT (JJ big) (NN dog)))")
    assert unbinarize(b) == t
