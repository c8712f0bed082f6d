"""Grammars trained on the shared GUM trees, trained once per test process and cached on disk.

Pytest fixtures defined here would be instantiated once per importing module, so the training
lives in ``lru_cache``d functions; the tests call them from their own fixtures.
"""

from __future__ import annotations

import functools
import tempfile
from pathlib import Path

from nltk import Tree

from parser.grammar import Grammar, train_grammar
from parser.trees import read_trees
from tests.shared_data import gum_files

_CACHE = Path(tempfile.mkdtemp(prefix="treewright-test-grammars-"))


def read_file(path: Path) -> list[Tree]:
    return read_trees(path.read_text(encoding="utf-8"), source=str(path))


@functools.cache
def gum_trees() -> tuple[Tree, ...]:
    """Every shared GUM tree (open data set: GUM, Zeldes 2017)."""
    return tuple(t for f in gum_files() for t in read_file(f))


@functools.cache
def split_trees() -> tuple[tuple[Tree, ...], tuple[Tree, ...]]:
    """(train, test): the 89 files whose names sort first, and the last 10."""
    files = gum_files()
    train = tuple(t for f in files[:89] for t in read_file(f))
    test = tuple(t for f in files[89:] for t in read_file(f))
    return train, test


@functools.cache
def full_grammar_path() -> Path:
    """The default grammar trained on all shared trees, saved under a temporary folder."""
    path = _CACHE / "gum-all.npz"
    train_grammar(gum_trees()).save(path)
    return path


@functools.cache
def full_grammar() -> Grammar:
    return Grammar.load(full_grammar_path())


@functools.cache
def split_grammar() -> Grammar:
    """The default grammar trained on the training part of the split."""
    path = _CACHE / "gum-split.npz"
    train_grammar(split_trees()[0]).save(path)
    return Grammar.load(path)
