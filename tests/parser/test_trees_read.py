"""Reading bracketed text: shapes that are accepted, and every malformed kind with its place."""

from __future__ import annotations

import io

import pytest
from nltk import Tree

from parser.errors import BracketSyntaxError, ParserError
from parser.trees import iter_trees, read_tree, read_trees

SIMPLE = "(S (NP (DT the) (NN dog)) (VP (VBD barked)))"


def test_read_trees_one_line_gives_nltk_trees():
    (tree,) = read_trees(SIMPLE)
    assert tree == Tree(
        "S",
        [
            Tree("NP", [Tree("DT", ["the"]), Tree("NN", ["dog"])]),
            Tree("VP", [Tree("VBD", ["barked"])]),
        ],
    )
    assert type(tree) is Tree


def test_read_trees_any_whitespace_and_several_per_line():
    text = "\n\n (A (B x))(A\t(B\r\n y))   (C\n z)\n\n(D\n  (E\n    w))"
    trees = read_trees(text)
    assert [t.label() for t in trees] == ["A", "A", "C", "D"]
    assert trees[2] == Tree("C", ["z"])
    assert trees[3] == Tree("D", [Tree("E", ["w"])])


def test_read_trees_empty_text_gives_no_trees():
    assert read_trees("") == []
    assert read_trees(" \n\t\n") == []


def test_read_trees_keeps_outer_wrapper_as_node_with_empty_label():
    tree = read_tree("( (S (NP (PRP it)) (VP (VBZ works))) )")
    assert tree.label() == ""
    assert len(tree) == 1 and tree[0].label() == "S"
    # the same choice as NLTK's own reader
    assert tree == Tree.fromstring("( (S (NP (PRP it)) (VP (VBZ works))) )")


def test_read_trees_leaves_bracket_tokens_as_stored():
    tree = read_tree("(S (-LRB- -LRB-) (NN x) (-RRB- -RRB-) (-LRB- [) (NN Re-LRB-a-RRB-d))")
    assert tree.leaves() == ["-LRB-", "x", "-RRB-", "[", "Re-LRB-a-RRB-d"]


def test_read_trees_label_may_follow_blank_after_bracket():
    assert read_tree("( S ( NP x ) )") == Tree("S", [Tree("NP", ["x"])])


def test_read_trees_reads_up_to_its_depth_limit_without_recursion():
    # the reader is iterative; it stops at the documented limit (test_trees_depth.py)
    from parser.trees import MAX_DEPTH

    depth = MAX_DEPTH - 1
    tree = read_tree("(X " * depth + "(T w)" + ")" * depth)
    assert tree.label() == "X" and tree.height() == MAX_DEPTH + 1


def test_iter_trees_reads_a_file_handle_lazily():
    handle = io.StringIO("(A (B x))\n(C\n  (D y))\n\n(E (F z)) (G (H w))\n")
    assert [t.label() for t in iter_trees(handle)] == ["A", "C", "E", "G"]


def test_iter_trees_reports_true_lines_and_source():
    handle = io.StringIO("(A (B x))\n\n(C\n  (D y)\n  (E ))\n")
    gen = iter_trees(handle, source="doc.ptb")
    assert next(gen).label() == "A"
    with pytest.raises(BracketSyntaxError) as err:
        next(gen)
    assert (err.value.line, err.value.column, err.value.source) == (5, 6, "doc.ptb")
    assert str(err.value).startswith("doc.ptb:line 5, column 6:")


def test_iter_trees_unclosed_at_end_of_file():
    handle = io.StringIO("(A (B x))\n(C (D y)\n")
    with pytest.raises(BracketSyntaxError) as err:
        list(iter_trees(handle))
    assert (err.value.line, err.value.column) == (3, 1)
    assert "line 2, column 1" in err.value.message


def test_iter_trees_stray_close_is_located():
    handle = io.StringIO("(A (B x))\n(C (D y)))\n(E (F z))\n")
    with pytest.raises(BracketSyntaxError) as err:
        list(iter_trees(handle))
    assert (err.value.line, err.value.column) == (2, 10)


def test_read_tree_wants_exactly_one_tree():
    assert read_tree("  " + SIMPLE + "\n").label() == "S"
    with pytest.raises(BracketSyntaxError) as err:
        read_tree("\n  ")
    assert (err.value.line, err.value.column, err.value.expected) == (2, 3, "'('")
    with pytest.raises(BracketSyntaxError) as err:
        read_tree("(A (B x))\n  (C (D y))")
    assert (err.value.line, err.value.column, err.value.expected) == (2, 3, "end of input")
    with pytest.raises(BracketSyntaxError) as err:
        read_tree("(A (B x)) junk")
    assert (err.value.line, err.value.column) == (1, 11)


# Each malformed kind: (text, line, column, expected). Columns point at the offending token.
MALFORMED = {
    "unclosed at end of input": ("(S\n  (NP (DT a)\n  (VP (VB b)))", 3, 15, "')'"),
    "stray close": ("(S (NP x))\n(S (NP y)))", 2, 11, "'(' or end of input"),
    "stray close first": ("  )", 1, 3, "'(' or end of input"),
    "empty label inside": ("(S\n  ((NP x)))", 2, 3, "a label"),
    "empty label inside, spaced": ("(S ( (NP x)))", 1, 4, "a label"),
    "empty brackets": ("(S (NP x))\n( )", 2, 3, "a label"),
    "node without children": ("(S\n  (NP ))", 2, 7, "a word or '('"),
    "word beside a later subtree": ("(S\n  (NP dog (NN cat)))", 2, 7, "'('"),
    "word beside an earlier subtree": ("(NP (NN cat) dog)", 1, 14, "'('"),
    "two words in a preterminal": ("(S (NN cat dog))", 1, 12, "')'"),
    "word outside any tree": ("(S (NP x))\n\n   stray (S (NP y))", 3, 4, "'('"),
    "word beside a subtree in the wrapper": ("(S (NP x))\n( (NP x) y)", 2, 10, "'('"),
    "bracket holding only a label": ("(S (x) (NP y))", 1, 6, "a word or '('"),
}


@pytest.mark.parametrize("kind", sorted(MALFORMED))
def test_read_trees_malformed_reports_line_column_and_expectation(kind):
    text, line, column, expected = MALFORMED[kind]
    with pytest.raises(BracketSyntaxError) as err:
        read_trees(text, source="in.ptb")
    assert (err.value.line, err.value.column) == (line, column), err.value
    assert err.value.expected == expected
    assert err.value.source == "in.ptb"
    assert isinstance(err.value, ParserError)


def test_read_trees_columns_count_characters_not_bytes():
    with pytest.raises(BracketSyntaxError) as err:
        read_trees("(S (NN café) (NN ))")
    assert (err.value.line, err.value.column) == (1, 18)


def test_read_trees_unclosed_message_names_the_tree_that_never_closed():
    with pytest.raises(BracketSyntaxError) as err:
        read_trees("(A (B x))\n(C (D y)\n(E (F z))\n")
    assert (err.value.line, err.value.column) == (4, 1)
    assert "begins at line 2, column 1" in err.value.message
