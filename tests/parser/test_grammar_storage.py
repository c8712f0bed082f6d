"""A saved grammar is deflated, and files written undeflated before still load the same."""

from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np
from nltk import Tree

from parser.grammar import Grammar, train_grammar

ARRAYS = (
    "bin_parent",
    "bin_left",
    "bin_right",
    "bin_logp",
    "un_parent",
    "un_child",
    "un_chain",
    "un_logp",
    "lex_symbols",
    "lex_logp",
)


def _grammar() -> Grammar:
    return train_grammar(
        [
            Tree.fromstring(t)
            for t in (
                "(ROOT (S (NP (DT the) (NN ferry)) (VP (VBD left) (PP (IN at) (NN dawn))) (. .)))",
                "(ROOT (S (NP (DT the) (NN crew)) (VP (VBD ate)) (. .)))",
            )
        ]
    )


def test_grammar_file_is_deflated_and_loads_identically(tmp_path: Path) -> None:
    g = _grammar()
    path = tmp_path / "g.npz"
    g.save(path)
    with zipfile.ZipFile(path) as zf:
        assert {i.compress_type for i in zf.infolist()} == {zipfile.ZIP_DEFLATED}
    h = Grammar.load(path)
    for name in ARRAYS:
        assert np.array_equal(getattr(h, name), getattr(g, name)), name


def test_grammar_file_written_undeflated_still_loads(tmp_path: Path) -> None:
    g = _grammar()
    deflated = tmp_path / "new.npz"
    g.save(deflated)
    with np.load(deflated, allow_pickle=False) as arrays:
        plain = {k: arrays[k] for k in arrays.files}
    old = tmp_path / "old.npz"
    with open(old, "wb") as fh:
        np.savez(fh, **plain)  # the form files had before deflating
    with zipfile.ZipFile(old) as zf:
        assert {i.compress_type for i in zf.infolist()} == {zipfile.ZIP_STORED}
    h = Grammar.load(old)
    assert h.symbols == g.symbols and h.vocab == g.vocab
    for name in ARRAYS:
        assert np.array_equal(getattr(h, name), getattr(g, name)), name
