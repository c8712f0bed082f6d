"""Split-merge refinement (parser.latent) on a small hand-made treebank.

Checks: splitting keeps every gold tree's probability; splitting then merging every split back
gives the grammar back; EM never lowers the training likelihood (the EM guarantee, Dempster,
Laird and Rubin 1977, theorem 1; from memory); the refined grammar's span posteriors, projected
onto ordinary labels by the chart, equal those of a brute-force enumeration of every tree, and
so does the max-rule-product tree.
"""

from __future__ import annotations

import math
from collections import defaultdict
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
from nltk import Tree

from parser import latent
from parser.chart import parse
from parser.errors import GrammarError
from parser.grammar import Grammar, train_grammar
from parser.trees import read_trees
from tests.parser.test_chart_bruteforce import max_rule_product

DATA = Path(__file__).resolve().parent.parent / "data" / "latent_small.ptb"
EXACT = latent.RefineOptions(smoothing=0.0, word_smoothing=None, em_iterations=6, em_after_merge=3)


@pytest.fixture(scope="module")
def trees() -> list[Tree]:
    return read_trees(DATA.read_text(encoding="utf-8"), source=str(DATA))


@pytest.fixture(scope="module")
def base(trees: list[Tree]) -> Grammar:
    return train_grammar(trees)


@pytest.fixture(scope="module")
def bank(trees: list[Tree], base: Grammar) -> latent.Treebank:
    return latent.treebank(base, latent.binarized_training_trees(trees, base))


@pytest.fixture(scope="module")
def refined(trees: list[Tree], base: Grammar) -> latent.LatentGrammar:
    return latent.refine(base, trees, latent.RefineOptions(cycles=1, em_iterations=8))


def _same(a: latent.LatentGrammar, b: latent.LatentGrammar) -> None:
    assert np.array_equal(a.ks, b.ks)
    np.testing.assert_allclose(a.bw, b.bw, rtol=0, atol=1e-9)
    np.testing.assert_allclose(a.uw, b.uw, rtol=0, atol=1e-9)
    np.testing.assert_allclose(a.lex, b.lex, rtol=0, atol=1e-9)


def _merge_all(lg: latent.LatentGrammar, bank: latent.Treebank) -> latent.LatentGrammar:
    ex = latent.expectations(lg, bank)
    pairs = {s: list(range(int(k) // 2)) for s, k in enumerate(lg.ks)}
    return lg.merge(pairs, ex.w_top, ex.w_bot)


def test_split_keeps_every_tree_probability(base: Grammar, bank: latent.Treebank) -> None:
    lg = latent.LatentGrammar.from_grammar(base)
    split = lg.split(np.random.default_rng(3), noise=0.05)
    assert split.n_subsymbols == 2 * base.n_symbols - 1
    assert not np.allclose(split.bw[:8], np.repeat(split.bw[:1], 8))
    np.testing.assert_allclose(
        latent.tree_logprobs(split, bank), latent.tree_logprobs(lg, bank), rtol=0, atol=1e-9
    )


def test_split_then_merge_back_gives_the_base_grammar(base: Grammar, bank: latent.Treebank) -> None:
    lg = latent.LatentGrammar.from_grammar(base)
    back = _merge_all(lg.split(np.random.default_rng(5), noise=0.05), bank)
    _same(back, lg)
    g = back.to_grammar()
    assert g.symbols == base.symbols
    for name in (
        "bin_parent",
        "bin_left",
        "bin_right",
        "un_parent",
        "un_child",
        "un_chain",
        "lex_symbols",
    ):
        assert np.array_equal(getattr(g, name), getattr(base, name)), name
    for name in ("bin_logp", "un_logp"):
        np.testing.assert_allclose(
            np.exp(getattr(g, name)), np.exp(getattr(base, name)), rtol=0, atol=1e-9
        )
    np.testing.assert_allclose(np.exp(g.lex_logp), np.exp(base.lex_logp), rtol=0, atol=1e-9)


def test_split_then_merge_back_after_a_cycle(
    refined: latent.LatentGrammar, bank: latent.Treebank
) -> None:
    assert refined.ks.max() == 2  # a refined grammar with some symbols split
    _same(_merge_all(refined.split(np.random.default_rng(7), noise=0.05), bank), refined)


def test_em_never_lowers_the_training_likelihood(trees: list[Tree], base: Grammar) -> None:
    seen: list[tuple[int, int, float]] = []
    opts = latent.RefineOptions(
        cycles=2, smoothing=0.0, word_smoothing=None, em_iterations=6, em_after_merge=3, seed=11
    )
    latent.refine(base, trees, opts, progress=lambda c, i, ll: seen.append((c, i, ll)))
    runs: dict[tuple[int, bool], list[float]] = defaultdict(list)
    for cycle, it, ll in seen:
        runs[(cycle, it > opts.em_iterations)].append(ll)
    assert len(runs) == 4 and all(len(r) >= 4 for r in runs.values())
    for key, lls in runs.items():
        for before, after in zip(lls, lls[1:], strict=False):
            assert after >= before - 1e-9 * abs(before), (key, before, after)
    # Not a flat line: the sub-symbols learn something.
    assert runs[(1, False)][-1] > runs[(1, False)][0] + 1.0


def test_lexical_smoothing_moves_only_the_word_rows(
    refined: latent.LatentGrammar, bank: latent.Treebank
) -> None:
    with pytest.raises(GrammarError, match="lexical smoothing"):
        latent.RefineOptions(lexical_smoothing=1.0)
    ex = latent.expectations(refined, bank)
    same = latent.maximize(refined, ex, 0.01, 1.0, None)
    lex = latent.maximize(refined, ex, 0.01, 1.0, 0.5)
    np.testing.assert_allclose(lex.bw, same.bw, rtol=0, atol=1e-12)
    np.testing.assert_allclose(lex.uw, same.uw, rtol=0, atol=1e-12)
    assert np.abs(lex.lex - same.lex).max() > 1e-3
    # A tag's sub-symbols here only emit words: each word row sums to one, smoothed or not.
    np.testing.assert_allclose(lex.lex.sum(axis=1), 1.0, rtol=1e-9)
    np.testing.assert_allclose(same.lex.sum(axis=1), 1.0, rtol=1e-9)


def test_refined_grammar_is_a_proper_pcfg(refined: latent.LatentGrammar) -> None:
    report = refined.to_grammar().tightness(tolerance=1e-6)
    assert report.tight


def test_a_tree_with_an_unknown_rule_is_refused(base: Grammar) -> None:
    odd = read_trees("(ROOT (S (VP (VBD slept) (NP (DT the) (NN mill))) (NP (PRP she))))")
    with pytest.raises(GrammarError, match="tree 0"):
        latent.treebank(base, latent.binarized_training_trees(odd, base))


# --------------------------------------------------------------------------- brute force
def _derivations(g: Grammar, words: list[str]) -> list[Tree]:
    """Every derivation (binarized tree over g's symbols) of ``words`` rooted in the start
    symbol, independently of the chart: tops by a unary edge over a bottom, bottoms by a
    binary rule or a word; one list per span and role, shorter spans first."""
    n = len(words)
    tops: dict[tuple[int, int], list[Tree]] = {}
    for width in range(1, n + 1):
        for i in range(n - width + 1):
            k = i + width
            bottoms: list[Tree] = []
            if width == 1:
                col = g.word_column(words[i], i == 0)
                bottoms = [
                    Tree(g.symbols[s], [words[i]])
                    for row, s in enumerate(g.lex_symbols)
                    if col >= 0 and g.lex_logp[row, col] > -math.inf
                ]
            for r in range(len(g.bin_parent)):
                left, right = g.symbols[g.bin_left[r]], g.symbols[g.bin_right[r]]
                for j in range(i + 1, k):
                    for a in tops[(i, j)]:
                        if a.label() != left:
                            continue
                        bottoms.extend(
                            Tree(g.symbols[g.bin_parent[r]], [a, b])
                            for b in tops[(j, k)]
                            if b.label() == right
                        )
            found = []
            for e in range(len(g.un_parent)):
                chain = g.chains[g.un_chain[e]]
                for low in bottoms:
                    if low.label() != g.symbols[g.un_child[e]]:
                        continue
                    node = low
                    for label in reversed(chain[:-1]):
                        node = Tree(label, [node])
                    found.append(node)
            tops[(i, k)] = found
    return [t for t in tops[(0, n)] if t.label() == g.symbols[g.start]]


def _spans(tree: Tree, start: int = 0) -> Iterator[tuple[str, int, int]]:
    if isinstance(tree[0], str):
        yield latent.bz.base_label(tree.label()), start, start + 1
        return
    end = start
    for child in tree:
        yield from _spans(child, end)
        end += len(child.leaves())
    if not tree.label().startswith("@"):
        yield latent.bz.base_label(tree.label()), start, end


def test_projected_posteriors_match_brute_force(
    base: Grammar, refined: latent.LatentGrammar
) -> None:
    words = "the owner of the mill slept .".split()
    trees = _derivations(base, words)
    assert len(trees) > 3
    logp = latent.tree_logprobs(refined, latent.treebank(base, trees))
    prob = np.exp(logp - logp.max())
    brute: dict[tuple[str, int, int], float] = defaultdict(float)
    for tree, p in zip(trees, prob / prob.sum(), strict=True):
        for span in set(_spans(tree)):
            brute[span] += p
    result = parse(
        refined.to_grammar(), words, posteriors=True, posterior_threshold=0.0, prune=None
    )
    chart = {
        (lab, i, k): p
        for lab, i, k, p in result.posteriors
        if not (k - i == 1 and lab in refined.base.tags)
    }
    phrases = {
        key: p
        for key, p in brute.items()
        if not (key[2] - key[1] == 1 and key[0] in refined.base.tags)
    }
    assert chart.keys() == {key for key, p in phrases.items() if p > 0}
    for key, p in phrases.items():
        assert chart[key] == pytest.approx(p, abs=1e-9), key
    # As span posteriors must: the root spans everything with certainty; every tree has
    # exactly one tag per word, so each word's tag posteriors sum to one.
    assert chart[(base.root_label, 0, len(words))] == pytest.approx(1.0, abs=1e-9)
    for i in range(len(words)):
        tags = sum(
            p
            for (lab, s, e), p in brute.items()
            if (s, e) == (i, i + 1) and lab in refined.base.tags
        )
        assert tags == pytest.approx(1.0, abs=1e-9)
    total = math.log(np.exp(logp).sum())
    assert result.inside_logprob == pytest.approx(total, abs=1e-9)


@pytest.mark.parametrize("which", ["one-way", "refined"])
def test_max_rule_tree_matches_brute_force(
    base: Grammar, refined: latent.LatentGrammar, which: str
) -> None:
    # Each anchored rule's posterior sums over the sub-symbols of its symbols (the oracle
    # enumerates the base grammar's derivations, scored by the refined grammar).
    lg = latent.LatentGrammar.from_grammar(base) if which == "one-way" else refined
    for words in SENTENCES:
        trees = _derivations(base, words)
        logp = latent.tree_logprobs(lg, latent.treebank(base, trees))
        best = max_rule_product(trees, list(np.exp(logp - logp.max())))
        assert best is not None
        result = parse(lg.to_grammar(), words, posteriors=True, max_rule=True, prune=None)
        assert str(result.max_rule) == str(latent.bz.unbinarize(best))


# ------------------------------------------------------------------ coarse-to-fine parsing
SENTENCES = [
    "the owner of the mill slept .".split(),
    "the miller saw the owner of the mill .".split(),
]


def _posterior_map(result: object) -> dict[tuple[str, int, int], float]:
    return {(lab, i, k): p for lab, i, k, p in result.posteriors}  # type: ignore[attr-defined]


@pytest.mark.parametrize("prune", [None, 1e-4])
def test_refined_chart_split_one_way_equals_the_base_chart(
    base: Grammar, prune: float | None
) -> None:
    # Every symbol with one sub-symbol is the base grammar itself: the refined chart must give
    # the base chart's inside probability, posteriors and trees (an exact identity, common
    # practice, no source); pruned at 1e-4, it loses only cells of posterior below that.
    tol = 1e-9 if prune is None else 1e-3
    one_way = latent.LatentGrammar.from_grammar(base).to_grammar()
    assert latent.is_refined(one_way) and not latent.is_refined(base)
    for words in SENTENCES:
        plain = parse(base, words, k=3, posteriors=True, posterior_threshold=0.0)
        fine = parse(one_way, words, k=3, posteriors=True, posterior_threshold=0.0, prune=prune)
        assert fine.inside_logprob == pytest.approx(plain.inside_logprob, abs=tol)
        a, b = _posterior_map(plain), _posterior_map(fine)
        assert {key for key, p in a.items() if p > tol} <= b.keys() <= a.keys()
        for key, p in a.items():
            assert b.get(key, 0.0) == pytest.approx(p, abs=tol), key
        assert [str(t) for t in fine.trees] == [str(t) for t in plain.trees]
        assert str(fine.consensus) == str(plain.consensus)


def test_projection_of_a_split_grammar_is_the_base_grammar(
    base: Grammar, bank: latent.Treebank
) -> None:
    # Splitting shares each rule's probability between the halves, so the projection of a
    # freshly split grammar (weighted by its own expected counts) is the base grammar again.
    split = latent.LatentGrammar.from_grammar(base).split(np.random.default_rng(2), noise=0.05)
    coarse, to_coarse = latent.coarse_grammar(split.to_grammar())
    assert coarse.symbols == base.symbols
    fine_names = split.to_grammar().symbols
    assert len(to_coarse) == len(fine_names) == 2 * base.n_symbols - 1
    for name, c in zip(fine_names, to_coarse, strict=True):
        assert name.split(latent.SUBSYMBOL)[0] == base.symbols[c]
    for words in SENTENCES:
        assert parse(coarse, words).logprobs[0] == pytest.approx(
            parse(base, words).logprobs[0], abs=1e-9
        )


def test_pruning_keeps_the_fine_posteriors(refined: latent.LatentGrammar) -> None:
    # Coarse-to-fine with a tiny threshold prunes only cells with (nearly) no mass: the
    # posteriors stay those of the full refined chart.
    g = refined.to_grammar()
    for words in SENTENCES:
        full = _posterior_map(
            parse(g, words, posteriors=True, posterior_threshold=1e-6, prune=None)
        )
        pruned = _posterior_map(
            parse(g, words, posteriors=True, posterior_threshold=1e-6, prune=1e-12)
        )
        assert full.keys() == pruned.keys()
        for key, p in full.items():
            assert pruned[key] == pytest.approx(p, abs=1e-6), key


@pytest.fixture(scope="module")
def refined2(trees: list[Tree], base: Grammar) -> latent.LatentGrammar:
    return latent.refine(base, trees, latent.RefineOptions(cycles=2, em_iterations=8))


@pytest.mark.parametrize("cycles", [1, 2])
def test_pruning_never_removes_a_pinned_span(
    refined: latent.LatentGrammar, refined2: latent.LatentGrammar, cycles: int
) -> None:
    from parser.chart import Constraints, pruning_mask, span_ids

    g = (refined if cycles == 1 else refined2).to_grammar()
    assert latent.n_levels(g) == cycles  # two cycles: pruned through two levels
    words = SENTENCES[1]
    free = parse(g, words, posteriors=True, posterior_threshold=0.0, prune=None)
    post = _posterior_map(free)
    # the least likely two-word span the grammar can build at all, pinned as a constituent
    pairs = [(p, i, k, lab) for (lab, i, k), p in post.items() if k - i == 2 and p > 0]
    p_low, i, k, lab = min(pairs)
    assert p_low < 0.5
    pins = Constraints(required=[(i, k, lab)])
    # A threshold above that span's free posterior would prune it without the rule.
    threshold = 0.9
    mask = pruning_mask(g, words, pins, threshold)
    assert mask is not None
    sid = span_ids(len(words))
    assert mask[sid[i, k]].all()
    assert not mask.all()  # the threshold does prune elsewhere
    result = parse(g, words, posteriors=True, constraints=pins, prune=threshold, max_rule=True)
    assert not result.fallback
    exact = parse(g, words, posteriors=True, constraints=pins, prune=None)
    for tree in (result.trees[0], result.consensus, result.max_rule):
        assert tree is not None
        assert (lab, i, k) in set(_spans(tree))
    assert (lab, i, k) in set(_spans(exact.trees[0]))


# ------------------------------------------------------------- the cycle hierarchy
def test_hierarchy_follows_the_cycles(
    refined: latent.LatentGrammar, refined2: latent.LatentGrammar
) -> None:
    # Same seed and options: the first cycle of a two-cycle run is the one-cycle run, so the
    # hierarchy's level 1 must be that grammar's sub-symbols.
    assert [len(k) for k in refined2.level_ks] == [refined.base.n_symbols] * 2
    assert np.array_equal(refined2.level_ks[0], np.ones(refined.base.n_symbols))
    assert np.array_equal(refined2.level_ks[1], refined.ks)
    g = refined2.to_grammar()
    up = np.full(refined.n_subsymbols, -1)
    for level in (0, 1):
        coarse, to_level = latent.level_grammar(g, level)
        assert coarse.n_symbols == int(refined2.level_ks[level].sum())
        for name, a in zip(g.symbols, to_level, strict=True):
            assert coarse.symbols[a].split(latent.SUBSYMBOL)[0] == name.split(latent.SUBSYMBOL)[0]
    # Every level-1 sub-symbol has one level-0 ancestor, and each split made two children.
    to0, to1 = refined2.ancestry
    for a0, a1 in zip(to0, to1, strict=True):
        assert up[a1] in (-1, a0)
        up[a1] = a0
    assert np.all(np.bincount(to1, minlength=refined.n_subsymbols) >= 1)


def test_projection_of_a_split_grammar_onto_its_parent_level(
    refined: latent.LatentGrammar,
) -> None:
    # A freshly split grammar gives every tree the probability of the grammar it was split
    # from, so its projection onto the level before the split is that grammar again (the
    # hierarchical form of test_projection_of_a_split_grammar_is_the_base_grammar).
    split = refined.split(np.random.default_rng(4), noise=0.05).to_grammar()
    assert latent.n_levels(split) == 2
    parent, _ = latent.level_grammar(split, 1)
    before = refined.to_grammar()
    assert parent.symbols == before.symbols
    for words in SENTENCES:
        a = parse(parent, words, k=3, posteriors=True, prune=None)
        b = parse(before, words, k=3, posteriors=True, prune=None)
        assert a.inside_logprob == pytest.approx(b.inside_logprob, abs=1e-9)
        assert a.logprobs == pytest.approx(b.logprobs, abs=1e-9)


def test_hierarchical_pruning_off_equals_the_unpruned_parse(
    refined2: latent.LatentGrammar, tmp_path: Path
) -> None:
    # Each level's grammar gives positive probability to every coarse rule under which a finer
    # rule is positive, so at threshold 0 no cell of positive posterior is pruned at any level:
    # the same trees, posteriors and inside probability as the complete refined chart.
    from parser.chart import Constraints, pruning_mask, span_ids

    g = refined2.to_grammar()
    g.save(tmp_path / "refined.npz")
    loaded = Grammar.load(tmp_path / "refined.npz")
    assert loaded.meta["latent"]["levels"] == g.meta["latent"]["levels"]
    assert latent.n_levels(loaded) == 2
    for words in SENTENCES:
        for pins in (None, Constraints(required=[(0, 2, None)], tags=["DT"] + [None] * 6)):
            if pins is not None and len(words) != 7:
                continue
            full = parse(g, words, k=4, posteriors=True, constraints=pins, prune=None)
            off = parse(loaded, words, k=4, posteriors=True, constraints=pins, prune=0.0)
            assert [str(t) for t in off.trees] == [str(t) for t in full.trees]
            assert off.logprobs == pytest.approx(full.logprobs, abs=1e-9)
            assert str(off.consensus) == str(full.consensus)
            assert off.inside_logprob == pytest.approx(full.inside_logprob, abs=1e-9)
            a, b = _posterior_map(full), _posterior_map(off)
            assert a.keys() == b.keys()
            for key, p in a.items():
                assert b[key] == pytest.approx(p, abs=1e-9), key
    # The finer level prunes cells the base symbols keep (the point of the hierarchy), and a
    # grammar saved without it still parses, through the base symbols alone.
    words = SENTENCES[1]
    multi = pruning_mask(g, words, None, 1e-2)
    single = pruning_mask(latent.without_hierarchy(g), words, None, 1e-2)
    assert multi is not None and single is not None
    assert multi.sum() < single.sum()
    assert not (multi & ~single).any()
    old = latent.without_hierarchy(g)
    assert latent.n_levels(old) == 0
    assert not parse(old, words, posteriors=True).fallback
    assert span_ids(len(words)).max() + 1 == multi.shape[0]


# ------------------------------------------------------------- EM stopping by likelihood
def test_em_stops_once_the_gain_has_fallen_under_the_tolerance(
    trees: list[Tree], base: Grammar, bank: latent.Treebank
) -> None:
    lg = latent.LatentGrammar.from_grammar(base).split(np.random.default_rng(1), noise=0.05)
    tol = 1e-3
    fixed = latent.RefineOptions(em_iterations=40)
    stopping = latent.RefineOptions(em_iterations=40, em_tolerance=tol)
    _, full = latent.em(lg, bank, 40, fixed)
    _, early = latent.em(lg, bank, 40, stopping)
    assert len(full) == 41  # without a tolerance: the whole count
    assert 2 < len(early) < len(full)
    # Until the stop the two runs are the same iterations.
    np.testing.assert_allclose(early, full[: len(early)], rtol=1e-12)
    gains = [(b - a) / abs(a) for a, b in zip(early, early[1:], strict=False)]
    # The last step gained at most the tolerance, after an earlier one gained ten times more;
    # no earlier step met both.
    assert gains[-1] <= tol and max(gains[:-1]) >= 10 * tol
    for x, g in enumerate(gains[:-1]):
        assert not (g <= tol and max(gains[: x + 1]) >= 10 * tol)
    with pytest.raises(GrammarError, match="EM tolerance"):
        latent.RefineOptions(em_tolerance=1.0)
