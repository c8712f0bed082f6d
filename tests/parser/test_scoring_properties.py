"""Hypothesis properties of the scores, over random trees that share their words."""

from __future__ import annotations

from hypothesis import given
from hypothesis import strategies as st

from parser.scoring import ScoringOptions, score_pair
from tests.parser.test_trees_properties import bracketings

OPTIONS = st.sampled_from(
    [
        ScoringOptions(),
        ScoringOptions(delete_pos=frozenset(), root_labels=frozenset()),
        ScoringOptions(multiset=False, count_preterminals=True),
        ScoringOptions(equivalences=({"ADVP", "PRT"}, {"S", "SBAR"})),
    ]
)


@st.composite
def tree_pairs(draw):
    n = draw(st.integers(1, 9))
    word_list = draw(st.lists(st.sampled_from(["a", "b", "(", "c"]), min_size=n, max_size=n))
    tags = draw(st.lists(st.sampled_from(["NN", "VB", ",", "."]), min_size=n, max_size=n))
    return draw(bracketings(word_list, tags)), draw(bracketings(word_list, tags))


@given(tree_pairs(), OPTIONS)
def test_identical_trees_score_one(pair, options):
    tree, _ = pair
    s = score_pair(tree, tree, options)
    assert (s.precision, s.recall, s.f1) == (1.0, 1.0, 1.0)
    assert s.exact and s.crossing == 0 and s.pos_correct == s.pos_total


@given(tree_pairs(), OPTIONS)
def test_f1_symmetric_and_precision_is_reverse_recall(pair, options):
    a, b = pair
    ab = score_pair(a, b, options)
    ba = score_pair(b, a, options)
    assert ab.f1 == ba.f1
    assert ab.precision == ba.recall
    assert ab.recall == ba.precision
    assert ab.unlabelled.f1 == ba.unlabelled.f1
    assert ab.exact == ba.exact


@given(tree_pairs(), OPTIONS)
def test_counts_are_consistent(pair, options):
    a, b = pair
    s = score_pair(a, b, options)
    assert 0 <= s.matched <= min(s.gold_count, s.test_count)
    if options.multiset:  # as sets, two labels on one span are one unlabelled bracket
        assert s.unlabelled.matched >= s.matched
    assert sum(c.matched for c in s.per_label.values()) == s.matched
    assert sum(c.gold for c in s.per_label.values()) == s.gold_count
    assert 0 <= s.crossing <= s.test_count
