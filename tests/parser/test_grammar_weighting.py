"""Weighting in-domain trees against reference trees: counts, MAP prior, the auto choice."""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from nltk import Tree

from parser.adapt import (
    DEFAULT,
    MIN_HELDOUT,
    choose_weighting,
    describe,
    heldout_split,
    parse_weighting,
)
from parser.chart import parse, parse_family
from parser.errors import GrammarError
from parser.grammar import Grammar, Weighting, train_grammar, train_weighted
from parser.lexicon import estimate_lexicon

PLAIN: dict[str, Any] = {
    "horizontal": 1,
    "vertical": 1,
    "tag_ancestors": 0,
    "features": (),
    "min_context": 0,
}
IN_DOMAIN = [Tree.fromstring("(ROOT (S (NP (PRP it)) (VP (VBD ran))))")]
REFERENCE = [Tree.fromstring("(ROOT (S (NP (DT the) (NN dog)) (VP (VBD ran))))")]


def _np_edges(g: Grammar) -> dict[tuple[str, ...], float]:
    sym = {s: i for i, s in enumerate(g.symbols)}
    return {
        g.chains[c]: float(np.exp(lp))
        for a, c, lp in zip(g.un_parent, g.un_chain, g.un_logp, strict=True)
        if a == sym["NP"]
    }


def _rules(g: Grammar) -> dict[tuple[str, ...], float]:
    out: dict[tuple[str, ...], float] = {
        (g.symbols[a], g.symbols[b], g.symbols[c]): float(lp)
        for a, b, c, lp in zip(g.bin_parent, g.bin_left, g.bin_right, g.bin_logp, strict=True)
    }
    out.update({g.chains[c]: float(lp) for c, lp in zip(g.un_chain, g.un_logp, strict=True)})
    return out


def test_weighting_rules_multiply_the_in_domain_rule_counts() -> None:
    # NP's top role: NP -> PRP once in-domain, NP branching once in the reference.
    g = train_grammar(IN_DOMAIN, reference=REFERENCE, weighting=Weighting(rules=3.0), **PLAIN)
    assert _np_edges(g) == pytest.approx({("NP",): 1 / 4, ("NP", "PRP"): 3 / 4})
    plain = train_grammar(IN_DOMAIN, reference=REFERENCE, **PLAIN)
    assert _np_edges(plain) == pytest.approx({("NP",): 1 / 2, ("NP", "PRP"): 1 / 2})


def test_weighting_rules_equal_repeating_the_in_domain_trees() -> None:
    more_in = IN_DOMAIN + [Tree.fromstring("(ROOT (S (NP (DT a) (NN cat)) (VP (VBD sat))))")]
    weighted = train_grammar(more_in, reference=REFERENCE, weighting=Weighting(rules=3.0), **PLAIN)
    repeated = train_grammar(more_in * 3 + REFERENCE, **PLAIN)
    assert _rules(weighted) == pytest.approx(_rules(repeated))


def test_weighting_prior_is_the_map_estimate() -> None:
    # P(r | A) = (c_in(r) + prior * P_ref(r | A)) / (c_in(A) + prior), here with prior 2:
    # NP -> PRP: (1 + 2 * 0) / 3; NP branching: (0 + 2 * 1) / 3.
    g = train_grammar(IN_DOMAIN, reference=REFERENCE, weighting=Weighting(prior=2.0), **PLAIN)
    assert _np_edges(g) == pytest.approx({("NP",): 2 / 3, ("NP", "PRP"): 1 / 3})
    # the prior's strength does not depend on the reference's size
    g10 = train_grammar(
        IN_DOMAIN, reference=REFERENCE * 10, weighting=Weighting(prior=2.0), **PLAIN
    )
    assert _np_edges(g10) == pytest.approx(_np_edges(g))


def test_lexicon_weights_equal_repeated_observations_of_frequent_words() -> None:
    # words seen twice or more are not rare either way, so weight 3 is three copies
    seen = [(0, "a", False), (0, "a", False), (1, "b", True), (1, "b", False), (0, "c", False)]
    weighted = [(t, w, f, 3.0 if w != "c" else 1.0) for t, w, f in seen]
    copies = [o for o in seen if o[1] != "c"] * 3 + [o for o in seen if o[1] == "c"]
    lp_w, vocab_w, sigs_w = estimate_lexicon(weighted, 2)
    lp_c, vocab_c, sigs_c = estimate_lexicon(copies, 2)
    assert vocab_w == vocab_c and sigs_w == sigs_c
    assert np.allclose(lp_w, lp_c)


def test_weighting_lexicon_is_separate_from_rules() -> None:
    # "ran" is VBD in both domains, "walked" only in-domain: its share of VBD grows with the
    # lexicon weight, while the rule probabilities do not move.
    ind = [Tree.fromstring("(ROOT (S (NP (PRP it)) (VP (VBD walked))))")]
    light, heavy = train_weighted(
        ind,
        reference=REFERENCE * 4,
        weightings=(Weighting(rules=2.0, lexicon=1.0), Weighting(rules=2.0, lexicon=8.0)),
        **PLAIN,
    )
    assert _rules(light) == pytest.approx(_rules(heavy))

    def walked(g: Grammar) -> float:
        return float(g.lexical_scores(["walked"])[0, g.symbols.index("VBD")])

    assert walked(heavy) > walked(light) + 1.0


def test_train_weighted_gives_one_grammar_per_weighting_from_one_count() -> None:
    grid = (Weighting(), Weighting(rules=3.0), Weighting(prior=2.0))
    many = train_weighted(IN_DOMAIN, reference=REFERENCE, weightings=grid, **PLAIN)
    for w, g in zip(grid, many, strict=True):
        one = train_grammar(IN_DOMAIN, reference=REFERENCE, weighting=w, **PLAIN)
        assert _rules(g) == pytest.approx(_rules(one))
        assert g.meta["weighting"] == w.to_dict()


def test_parse_weighting_reads_what_describe_writes() -> None:
    for w in (Weighting(), Weighting(rules=2.0, lexicon=8.0), Weighting(prior=50.0, lexicon=4.0)):
        assert parse_weighting(describe(w)) == w
    assert parse_weighting("5") == Weighting(rules=5.0, lexicon=5.0)


@pytest.mark.parametrize(
    "text, part",
    [
        ("rules=x", "'rules=x'"),
        ("weight=2", "'weight=2'"),
        ("rules=2,rules=3", "given twice"),
        ("", "empty"),
    ],
)
def test_parse_weighting_names_the_bad_part(text: str, part: str) -> None:
    with pytest.raises(GrammarError, match=part):
        parse_weighting(text)


def test_weighting_refuses_zero_and_negative_weights() -> None:
    with pytest.raises(GrammarError, match="positive"):
        Weighting(rules=0.0)
    with pytest.raises(GrammarError, match="positive"):
        parse_weighting("prior=-1")


def _trees(n: int, text: str) -> list[Tree]:
    return [Tree.fromstring(text) for _ in range(n)]


def test_choose_weighting_picks_the_grid_point_with_the_best_heldout_f1() -> None:
    # Constructed case: the reference says "fish" after a noun phrase is a noun (one long
    # NP); the in-domain trees say it is a verb. Only a weight heavy enough for the in-domain
    # counts to win parses the held-out trees right, so the heaviest grid point must win.
    reference = _trees(60, "(ROOT (NP (NP (DT the) (NN people)) (NN fish)))")
    domain = "(ROOT (S (NP (DT the) (NN people)) (VP (VB fish))))"
    train, held = _trees(5, domain), _trees(MIN_HELDOUT, domain)
    grid = (Weighting(), Weighting(rules=2.0, lexicon=2.0), Weighting(rules=50.0, lexicon=50.0))
    choice = choose_weighting(train, held, reference, grid=grid, **PLAIN)
    f1 = [f for _, f in choice.scores]
    assert [w for w, _ in choice.scores] == list(grid)
    assert f1[2] == max(f1) and f1[0] < f1[2]
    assert choice.weighting == grid[int(np.argmax(f1))]
    assert choice.to_dict()["grid"][2] == {"weighting": "50", "f1": round(f1[2], 5)}


def test_choose_weighting_takes_the_first_of_equal_scores_and_the_default_when_few() -> None:
    grid = (Weighting(rules=2.0), Weighting(rules=4.0), Weighting(rules=8.0))
    tree = "(ROOT (S (NP (PRP it)) (VP (VBD ran))))"
    # per-sentence (matched, gold, test): F1 0.5, 0.7, 0.7 on every held-out sentence
    counts = [[(f, 10, 10)] * MIN_HELDOUT for f in (5, 7, 7)]
    choice = choose_weighting(
        _trees(3, tree),
        _trees(MIN_HELDOUT, tree),
        REFERENCE,
        grid=grid,
        score=lambda grammars: counts[: len(grammars)],
        **PLAIN,
    )
    assert choice.weighting == grid[1]
    assert [f for _, f in choice.scores] == pytest.approx([0.5, 0.7, 0.7])
    few = choose_weighting(
        _trees(3, tree), _trees(MIN_HELDOUT - 1, tree), REFERENCE, grid=grid, **PLAIN
    )
    assert few.weighting == DEFAULT and few.scores == []
    assert choose_weighting(_trees(3, tree), _trees(30, tree), [], **PLAIN).weighting == Weighting()


def test_choose_weighting_keeps_the_first_point_when_the_best_gains_within_the_noise() -> None:
    grid = (Weighting(), Weighting(rules=4.0))
    tree = "(ROOT (S (NP (PRP it)) (VP (VBD ran))))"
    # the second point is better overall (F1 0.55 against 0.5) but gains on half of the
    # sentences and loses on the others: its paired bootstrap interval straddles 0
    mixed = [(10, 10, 10), (1, 10, 10)] * (MIN_HELDOUT // 2)
    counts = [[(5, 10, 10)] * MIN_HELDOUT, mixed]
    choice = choose_weighting(
        _trees(3, tree),
        _trees(MIN_HELDOUT, tree),
        REFERENCE,
        grid=grid,
        score=lambda grammars: counts,
        **PLAIN,
    )
    assert [f for _, f in choice.scores] == pytest.approx([0.5, 0.55])
    assert choice.weighting == grid[0] and "within the noise" in choice.reason


def test_heldout_split_holds_out_every_tenth() -> None:
    trees = [Tree("ROOT", [Tree("NN", [str(i)])]) for i in range(1, 26)]
    train, held = heldout_split(trees)
    assert [t.leaves()[0] for t in held] == ["10", "20"]
    assert len(train) == 23


def test_parse_family_equals_separate_parses_when_only_impossible_cells_are_pruned() -> None:
    # A family of weightings of one count has one support, so pruning the cells of zero
    # posterior under the first grammar (prune 0) leaves every later grammar exact; a grammar
    # with other symbols (the reference alone) is matched by symbol name.
    reference = [
        Tree.fromstring(t)
        for t in (
            "(ROOT (S (NP (PRP she)) (VP (VBD saw) (NP (DT the) (NN man)) "
            "(PP (IN with) (NP (DT the) (NN telescope))))))",
            "(ROOT (S (NP (PRP she)) (VP (VBD saw) (NP (NP (DT the) (NN man)) "
            "(PP (IN with) (NP (DT the) (NN hat)))))))",
        )
    ]
    domain = [
        Tree.fromstring(
            "(ROOT (S (NP (PRP he)) (VP (VBD saw) (NP (NP (DT the) (NN man)) "
            "(PP (IN with) (NP (DT the) (NN telescope)))))))"
        )
    ]
    grid = (Weighting(), Weighting(rules=4.0, lexicon=1.0), Weighting(prior=2.0))
    family = [
        *train_weighted(domain, reference=reference, weightings=grid, **PLAIN),
        train_grammar([], reference=reference, **PLAIN),
    ]
    words = "she saw the man with the telescope".split()
    results = parse_family(family, words, prune=0.0)
    alone = [parse(g, words, posteriors=True) for g in family]
    for got, want in zip(results, alone, strict=True):
        assert got.consensus == want.consensus
        assert [p[:3] for p in got.posteriors] == [p[:3] for p in want.posteriors]
        assert np.allclose([p[3] for p in got.posteriors], [p[3] for p in want.posteriors])
    # the weightings disagree on the attachment, so the family is not one grammar four times
    assert len({str(r.consensus) for r in alone}) > 1
