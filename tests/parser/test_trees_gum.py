"""External check on open data: every tree of the GUM corpus (Zeldes 2017, CC BY) read, written
and read again, compared with NLTK's own reader as a reference library."""

from __future__ import annotations

import time

import pytest
from nltk import Tree

from parser.trees import iter_trees, read_trees, write_trees
from tests.shared_data import gum_files

pytestmark = pytest.mark.external


@pytest.fixture(scope="module")
def gum() -> list[tuple[str, str, list[Tree]]]:
    out = []
    for path in gum_files():
        text = path.read_text(encoding="utf-8")
        out.append((path.name, text, read_trees(text, source=path.name)))
    return out


def test_gum_round_trip_one_line(gum):
    total = 0
    for name, _, trees in gum:
        again = read_trees(write_trees(trees))
        assert again == trees, name
        total += len(trees)
    assert total > 4000


def test_gum_round_trip_indented_is_byte_exact(gum):
    for name, text, trees in gum:
        written = write_trees(trees, indent=True)
        assert written == text.rstrip("\n") + "\n", name
        assert read_trees(written) == trees, name


def test_gum_same_trees_as_nltk_fromstring(gum):
    for name, text, trees in gum:
        blocks = [b for b in text.split("\n\n") if b.strip()]
        assert [Tree.fromstring(b) for b in blocks] == trees, name


def test_gum_iter_trees_matches_read_trees(gum):
    for path, (name, _, trees) in zip(gum_files(), gum, strict=True):
        with path.open(encoding="utf-8") as handle:
            assert list(iter_trees(handle)) == trees, name


def test_gum_reading_everything_is_fast(gum):
    # ~4,000 trees, 2.4 MB: about 0.3 s on a 2-core machine; the bound only catches a blow-up
    texts = [text for _, text, _ in gum]
    start = time.perf_counter()
    for text in texts:
        read_trees(text)
    assert time.perf_counter() - start < 3.0
