"""Grammar estimation: local normalization, tightness, saved form, rule-file errors."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from nltk import Tree

from parser.errors import GrammarError
from parser.grammar import Grammar, train_grammar
from tests.parser.gum_grammar import full_grammar

DATA = Path(__file__).resolve().parent.parent / "data"


def _sums(g: Grammar) -> tuple[np.ndarray, np.ndarray]:
    """Total probability of each symbol's top expansions and bottom expansions."""
    top = np.zeros(g.n_symbols)
    np.add.at(top, g.un_parent, np.exp(g.un_logp))
    bot = np.zeros(g.n_symbols)
    np.add.at(bot, g.bin_parent, np.exp(g.bin_logp))
    bot[g.lex_symbols] += np.exp(g.lex_logp).sum(axis=1)
    return top, bot


def _assert_normalized(g: Grammar) -> None:
    top, bot = _sums(g)
    used_top = np.zeros(g.n_symbols, dtype=bool)
    used_top[g.un_parent] = True
    used_bot = np.zeros(g.n_symbols, dtype=bool)
    used_bot[g.bin_parent] = True
    used_bot[g.lex_symbols] = True
    # Local normalization within 1e-9 (common practice, no source).
    assert np.all(np.abs(top[used_top] - 1.0) < 1e-9)
    assert np.all(np.abs(bot[used_bot] - 1.0) < 1e-9)


def test_grammar_small_trained_is_normalized_and_counts_are_relative_frequencies() -> None:
    trees = [
        Tree.fromstring(s)
        for s in (
            "(ROOT (S (NP (DT the) (NN dog)) (VP (VBD barked))))",
            "(ROOT (S (NP (PRP it)) (VP (VBD ran) (ADVP (RB far)))))",
            "(ROOT (S (NP (DT the) (NN cat)) (VP (VBD sat))))",
        )
    ]
    g = train_grammar(trees, horizontal=1, vertical=1, tag_ancestors=0, features=())
    _assert_normalized(g)
    sym = {s: i for i, s in enumerate(g.symbols)}
    # NP is a branching NP in 2 of 3 cases, a unary chain NP -> PRP in 1.
    np_edges = {
        g.chains[c]: float(np.exp(lp))
        for a, c, lp in zip(g.un_parent, g.un_chain, g.un_logp, strict=True)
        if a == sym["NP"]
    }
    assert np_edges == pytest.approx({("NP",): 2 / 3, ("NP", "PRP"): 1 / 3})


@pytest.mark.external
def test_grammar_gum_normalized_tight_and_sized() -> None:
    # Open data set: GUM (Zeldes 2017). Chi and Geman 1998: relative-frequency estimates from
    # a finite treebank are tight (from memory).
    g = full_grammar()
    _assert_normalized(g)
    report = g.tightness()
    assert report.tight
    assert all(abs(z - 1.0) < 1e-6 for z in report.partition.values())
    assert "NP" in g.labels and "VP" in g.labels and "NN" in g.tags
    assert not any("^" in lab or lab.startswith("@") for lab in g.labels + g.tags)


@pytest.mark.external
@pytest.mark.parametrize("p,tight,z", [(0.6, False, 2 / 3), (0.4, True, 1.0), (0.75, False, 1 / 3)])
def test_grammar_tightness_of_the_runaway_grammar(p: float, tight: bool, z: float) -> None:
    # S -> S S (p), S -> a (1 - p): Z = (1 - p) / p for p > 1/2, else 1 (Booth and Thompson
    # 1973, consistency condition; from memory).
    g = Grammar.from_text(f"{p!r} S -> S S\n{1 - p!r} S -> 'a'\n")
    report = g.tightness()
    assert report.tight is tight
    assert report.partition["S"] == pytest.approx(z, abs=1e-9)
    assert report.iterations > 1


def test_grammar_runaway_file_reports_two_thirds() -> None:
    g = Grammar.from_text((DATA / "runaway.pcfg").read_text())
    report = g.tightness()
    assert not report.tight
    assert report.partition["S"] == pytest.approx(2 / 3, abs=1e-9)


def test_grammar_save_load_roundtrip(tmp_path: Path) -> None:
    trees = [Tree.fromstring("(ROOT (S (NP (DT the) (NN dog)) (VP (VBD barked) (. .))))")]
    g = train_grammar(trees)
    path = tmp_path / "g.npz"
    g.save(path)
    h = Grammar.load(path)
    assert h.symbols == g.symbols and h.vocab == g.vocab and h.chains == g.chains
    for name in (
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
    ):
        assert np.array_equal(getattr(h, name), getattr(g, name)), name
    assert h.meta == g.meta
    with pytest.raises(ValueError):
        h.bin_logp[0] = 0.0  # immutable arrays


def test_grammar_load_refuses_other_files_and_versions(tmp_path: Path) -> None:
    bad = tmp_path / "bad.npz"
    bad.write_text("not a grammar")
    with pytest.raises(GrammarError, match="not a Treewright grammar"):
        Grammar.load(bad)
    g = Grammar.from_text("1.0 S -> 'a'\n")
    path = tmp_path / "g.npz"
    g.save(path)
    data = dict(np.load(path))
    import json

    meta = json.loads(data["meta"].tobytes())
    meta["format_version"] = 999
    data["meta"] = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)
    np.savez(tmp_path / "future.npz", **data)
    with pytest.raises(GrammarError, match="format version 999"):
        Grammar.load(tmp_path / "future.npz")


@pytest.mark.parametrize(
    "text,message",
    [
        ("1.0 S -> A B C\n", "one or two symbols"),
        ("1.5 S -> 'a'\n", "not in"),
        ("S -> 'a'\n", "line 1"),
        ("0.5 S -> A\n0.5 A -> S\n1.0 A -> 'a'\n", "cycle"),
        ("", "no rules"),
    ],
)
def test_grammar_rule_text_errors(text: str, message: str) -> None:
    with pytest.raises(GrammarError, match=message):
        Grammar.from_text(text)


def test_grammar_training_errors() -> None:
    with pytest.raises(GrammarError, match="zero trees"):
        train_grammar([])
    with pytest.raises(GrammarError, match="root label"):
        train_grammar([Tree.fromstring("(ROOT (NN a))"), Tree.fromstring("(TOP (NN a))")])
