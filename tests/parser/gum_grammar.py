"""Grammars trained on the shared GUM trees, trained once per test run and cached on disk.

Pytest fixtures defined here would be instantiated once per importing module, so the training
lives in ``functools.cache``d functions; the tests call them from their own fixtures. Under
pytest-xdist every worker is its own process: the trained grammar is saved in a folder named
after the run's id (``PYTEST_XDIST_TESTRUNUID``), shared by the workers, and a file lock lets
one worker train while the others wait and then load its file. Without xdist the folder is a
fresh temporary one.
"""

from __future__ import annotations

import fcntl
import functools
import os
import tempfile
from collections.abc import Callable, Sequence
from pathlib import Path

from nltk import Tree

from parser.grammar import Grammar, train_grammar
from parser.trees import read_trees
from tests.shared_data import gum_files


def _cache_dir() -> Path:
    run = os.environ.get("PYTEST_XDIST_TESTRUNUID")
    if not run:
        return Path(tempfile.mkdtemp(prefix="treewright-test-grammars-"))
    folder = Path(tempfile.gettempdir()) / f"treewright-test-grammars-{run}"
    folder.mkdir(exist_ok=True)
    return folder


_CACHE = _cache_dir()


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


def trained_path(
    name: str,
    trees: Callable[[], Sequence[Tree]],
    train: Callable[[Sequence[Tree]], Grammar] = train_grammar,
) -> Path:
    """The path of the grammar ``train`` (default: the default grammar) makes of ``trees()``,
    trained by the first process of the run that asks for it."""
    path = _CACHE / f"{name}.npz"
    with open(_CACHE / f"{name}.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if not path.exists():
            partial = _CACHE / f"{name}.{os.getpid()}.partial.npz"
            train(trees()).save(partial)
            os.replace(partial, path)
    return path


@functools.cache
def full_grammar_path() -> Path:
    """The default grammar trained on all shared trees, saved under a temporary folder."""
    return trained_path("gum-all", gum_trees)


@functools.cache
def full_grammar() -> Grammar:
    return Grammar.load(full_grammar_path())


@functools.cache
def split_grammar_path() -> Path:
    """The default grammar trained on the training part of the split."""
    return trained_path("gum-split", lambda: split_trees()[0])


@functools.cache
def split_grammar() -> Grammar:
    return Grammar.load(split_grammar_path())
