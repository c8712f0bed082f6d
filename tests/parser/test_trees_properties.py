"""Hypothesis properties of the reader and writer.

The strategies here are also used by the scoring tests.
"""

from __future__ import annotations

from hypothesis import given
from hypothesis import strategies as st
from nltk import Tree

from parser.errors import BracketSyntaxError
from parser.trees import (
    constituents,
    escape_word,
    pos_tags,
    read_tree,
    read_trees,
    tree_from_spans,
    words,
    write_tree,
    write_trees,
)

# Anything but whitespace (categories Z*, and the control characters, some of which Python
# counts as whitespace) and round brackets; plus the bracket words themselves.
_WORD_CHARS = st.characters(
    exclude_categories=("Zs", "Zl", "Zp", "Cc", "Cs"), exclude_characters="()"
)
words_st = st.one_of(
    st.sampled_from(["(", ")", "[", "]", "{", "}", "-LRB-", "-RRB-", "f(x)", ".", ","]),
    st.text(_WORD_CHARS, min_size=1, max_size=6),
    st.text(st.sampled_from("ab()é"), min_size=1, max_size=4),
)
labels_st = st.one_of(
    st.sampled_from(["S", "NP", "VP", "PP", "NP-SBJ", "NP=1", "-NONE-", "-LRB-", ",", "PRP$"]),
    st.text(_WORD_CHARS, min_size=1, max_size=4),
)
preterminals_st = st.builds(lambda tag, word: Tree(tag, [word]), labels_st, words_st)
trees_st = st.recursive(
    preterminals_st,
    lambda kids: st.builds(
        lambda label, children: Tree(label, children),
        labels_st,
        st.lists(kids, min_size=1, max_size=4),
    ),
    max_leaves=20,
)
phrase_labels_st = st.sampled_from(["S", "NP", "VP", "PP", "ADVP", "PRT", "SBAR", "X"])


def stored_form(tree: Tree) -> Tree:
    """The tree as the reader gives it back: round brackets in words and labels spelled out."""
    if isinstance(tree, str):
        return escape_word(tree)
    return Tree(escape_word(tree.label()), [stored_form(c) for c in tree])


@st.composite
def bracketings(draw, word_list: list[str], tags: list[str]) -> Tree:
    """A random tree over exactly ``word_list``: random spans, kept when they nest."""
    n = len(word_list)
    raw = draw(
        st.lists(
            st.tuples(phrase_labels_st, st.integers(0, n - 1), st.integers(1, n)), max_size=3 * n
        )
    )
    kept: list[tuple[str, int, int]] = []
    for label, a, b in raw:
        start, end = min(a, b), max(a, b)
        if start == end:
            continue
        if all(
            end <= s or e <= start or (s <= start and end <= e) or (start <= s and e <= end)
            for _, s, e in kept
        ):
            kept.append((label, start, end))
    return tree_from_spans(word_list, tags, kept, root=draw(st.sampled_from(["ROOT", "", "S"])))


@given(trees_st)
def test_write_read_round_trip_one_line(tree):
    text = write_tree(tree)
    assert read_tree(text) == stored_form(tree)
    assert write_tree(read_tree(text)) == text


@given(trees_st, st.integers(4, 80))
def test_write_read_round_trip_indented(tree, width):
    text = write_tree(tree, indent=True, width=width)
    assert read_tree(text) == stored_form(tree)


@given(st.lists(trees_st, max_size=4), st.booleans())
def test_write_trees_read_trees_round_trip(trees, indent):
    assert read_trees(write_trees(trees, indent=indent)) == [stored_form(t) for t in trees]


@given(st.text())
def test_read_trees_on_any_text_succeeds_or_raises_bracket_syntax_error(text):
    try:
        trees = read_trees(text)
    except BracketSyntaxError as err:
        assert err.line >= 1 and err.column >= 1
        return
    assert read_trees(write_trees(trees)) == trees


@given(st.text(alphabet=st.sampled_from("( )\nAB")))
def test_read_trees_on_bracket_soup(text):
    try:
        read_trees(text)
    except BracketSyntaxError as err:
        lines = text.split("\n")
        assert 1 <= err.line <= len(lines)
        assert 1 <= err.column <= len(lines[err.line - 1]) + 1


@given(st.data(), st.lists(st.sampled_from(["a", "b", "c"]), min_size=1, max_size=8))
def test_tree_from_spans_inverts_constituents(data, word_list):
    tree = data.draw(bracketings(word_list, ["T"] * len(word_list)))
    rebuilt = tree_from_spans(words(tree), pos_tags(tree), constituents(tree), root=None)
    assert rebuilt == tree
