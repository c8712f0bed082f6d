"""The reader's depth limit: the deepest accepted tree reads and writes back; one level more
is refused at the bracket that goes too deep, with its line and column."""

from __future__ import annotations

import pytest

from parser.errors import BracketSyntaxError
from parser.trees import MAX_DEPTH, read_tree, read_trees, words, write_tree


def nested(levels: int) -> str:
    return "(ROOT " + "(X " * (levels - 2) + "(UH ahoy)" + ")" * (levels - 2) + ")"


def test_trees_depth_limit_itself_reads_and_writes_back() -> None:
    text = nested(MAX_DEPTH)
    tree = read_tree(text)
    assert write_tree(tree) == text and words(tree) == ["ahoy"]
    assert tree.height() == MAX_DEPTH + 1  # NLTK counts the word as a level too


@pytest.mark.parametrize("levels", [MAX_DEPTH + 1, 1_000, 100_000])
def test_trees_depth_past_the_limit_is_located(levels: int) -> None:
    text = "(ROOT (UH fine))\n" + nested(levels) + "\n"
    with pytest.raises(BracketSyntaxError) as caught:
        read_trees(text, source="deep.ptb")
    err = caught.value
    assert err.line == 2
    # the bracket that opens level MAX_DEPTH + 1: "(ROOT " then "(X " per level
    assert err.column == len("(ROOT ") + 3 * (MAX_DEPTH - 1) + 1
    assert f"more than {MAX_DEPTH} levels" in str(err)
