"""PARSEVAL scoring on hand-worked examples; the arithmetic is in the comments."""

from __future__ import annotations

from collections import Counter
from fractions import Fraction

import pytest

from parser.errors import ParserError
from parser.scoring import (
    Counts,
    ScoringError,
    ScoringOptions,
    WordMismatchError,
    label_confusions,
    score_corpus,
    score_pair,
)
from parser.trees import read_tree

# words: the0 old1 man2 saw3 a4 dog5 in6 the7 park8
GOLD = read_tree(
    "(ROOT (S (NP (DT the) (JJ old) (NN man)) (VP (VBD saw) (NP (NP (DT a) "
    "(NN dog)) (PP (IN in) (NP (DT the) (NN park)))))))"
)
# gold: S(0,9) NP(0,3) VP(3,9) NP(4,9) NP(4,6) PP(6,9) NP(7,9)                  = 7
# test: the PP attached to the VP and labelled ADVP:
#       S(0,9) NP(0,3) VP(3,9) NP(4,6) ADVP(6,9) NP(7,9)                         = 6
# shared labelled: S NP(0,3) VP NP(4,6) NP(7,9)                                  = 5
TEST = read_tree(
    "(ROOT (S (NP (DT the) (JJ old) (NN man)) (VP (VBD saw) (NP (DT a) (NN dog)) "
    "(ADVP (IN in) (NP (DT the) (NN park))))))"
)


def test_score_pair_seven_gold_six_test_five_shared():
    s = score_pair(GOLD, TEST)
    assert (s.matched, s.gold_count, s.test_count) == (5, 7, 6)
    assert s.precision == pytest.approx(5 / 6)  # 5 / 6 test
    assert s.recall == pytest.approx(5 / 7)  # 5 / 7 gold
    # F1 = 2PR / (P + R) = 2 * 5 / (7 + 6) = 10/13
    assert Fraction(s.f1).limit_denominator(100) == Fraction(10, 13)
    assert not s.exact
    # unlabelled: all 6 test spans are gold spans (6,9 is a gold PP) -> 6/6, 6/7, 12/13
    assert (s.unlabelled.matched, s.unlabelled.gold, s.unlabelled.test) == (6, 7, 6)
    assert s.unlabelled.f1 == pytest.approx(12 / 13)
    assert s.crossing == 0
    assert (s.pos_correct, s.pos_total) == (9, 9)
    assert s.per_label["NP"] == Counts(matched=3, gold=4, test=3)
    assert s.per_label["PP"] == Counts(matched=0, gold=1, test=0)
    assert s.per_label["ADVP"] == Counts(matched=0, gold=0, test=1)
    assert s.length == 9


def test_label_confusions_same_span_different_label():
    assert label_confusions(GOLD, TEST) == Counter({("PP", "ADVP"): 1})
    assert label_confusions(GOLD, GOLD) == Counter()


def test_crossing_brackets_counts_test_brackets_that_cross_gold():
    # gold [[a b] c]: X(0,3) Y(0,2); test [a [b c]]: X(0,3) Z(1,3); Z crosses Y
    gold = read_tree("(X (Y (T a) (T b)) (T c))")
    test = read_tree("(X (T a) (Z (T b) (T c)))")
    s = score_pair(gold, test)
    assert s.crossing == 1
    assert (s.matched, s.gold_count, s.test_count) == (1, 2, 2)


def test_identical_trees_score_one_and_exact():
    s = score_pair(GOLD, GOLD)
    assert (s.precision, s.recall, s.f1, s.exact, s.crossing) == (1.0, 1.0, 1.0, True, 0)


def test_function_tags_stripped_by_default():
    gold = read_tree("(S (NP-SBJ-1 (PRP I)) (VP (VBD ran)))")
    test = read_tree("(S (NP (PRP I)) (VP=2 (VBD ran)))")
    assert score_pair(gold, test).exact
    s = score_pair(gold, test, ScoringOptions(strip_function_tags=False))
    assert (s.matched, s.gold_count, s.test_count) == (1, 3, 3)  # only S(0,2) matches


def test_punctuation_removed_by_gold_tag_and_spans_recomputed():
    # words John0 left1 .2 ; the "." is deleted, so both VPs become (1, 2)
    gold = read_tree("(ROOT (S (NP (NNP John)) (VP (VBD left)) (. .)))")
    test = read_tree("(ROOT (S (NP (NNP John)) (VP (VBD left) (NN .))))")
    s = score_pair(gold, test)  # the test tags "." as NN: the GOLD tag decides
    assert s.exact and (s.gold_count, s.length) == (3, 2)
    assert (s.pos_correct, s.pos_total) == (2, 2)
    # keep punctuation: gold S(0,3) NP(0,1) VP(1,2); test S(0,3) NP(0,1) VP(1,3) -> 2 of 3
    kept = score_pair(gold, test, ScoringOptions(delete_pos=frozenset()))
    assert (kept.matched, kept.gold_count, kept.test_count) == (2, 3, 3)
    assert (kept.pos_correct, kept.pos_total) == (2, 3)


def test_constituent_over_punctuation_only_is_dropped():
    gold = read_tree("(ROOT (S (NP (NNP John)) (VP (VBD left)) (. .)))")
    test = read_tree("(ROOT (S (NP (NNP John)) (VP (VBD left)) (X (. .))))")
    assert score_pair(gold, test).exact  # X covers only "." -> no words left -> dropped
    s = score_pair(gold, test, ScoringOptions(delete_pos=frozenset()))
    assert (s.matched, s.gold_count, s.test_count) == (3, 3, 4)  # P = 3/4, R = 1


def test_outer_wrapper_not_counted_when_empty_root_or_top():
    wrapped = read_tree("( (S (NP (PRP I)) (VP (VBD ran))))")
    rooted = read_tree("(ROOT (S (NP (PRP I)) (VP (VBD ran))))")
    top = read_tree("(TOP (S (NP (PRP I)) (VP (VBD ran))))")
    # each side counts S(0,2) NP(0,1) VP(1,2) = 3
    for a in (wrapped, rooted, top):
        for b in (wrapped, rooted, top):
            s = score_pair(a, b)
            assert s.exact and s.gold_count == 3
    # counting the wrapper: ""(0,2) vs ROOT(0,2) differ -> 3 of 4 each side
    s = score_pair(wrapped, rooted, ScoringOptions(root_labels=frozenset()))
    assert (s.matched, s.gold_count, s.test_count) == (3, 4, 4)
    # a chain of wrappers is skipped as a whole
    assert score_pair(read_tree("( (ROOT (S (NP (PRP I)) (VP (VBD ran)))))"), rooted).exact


def test_label_equivalence_classes():
    gold = read_tree("(S (VP (VB give) (PRT (RP up))))")
    test = read_tree("(S (VP (VB give) (ADVP (RP up))))")
    # S(0,2) VP(0,2) match; PRT(1,2) vs ADVP(1,2) do not -> 2 of 3
    assert score_pair(gold, test).matched == 2
    options = ScoringOptions(equivalences=({"ADVP", "PRT"},))
    s = score_pair(gold, test, options)
    assert s.exact
    assert s.per_label["ADVP/PRT"] == Counts(1, 1, 1)
    with pytest.raises(ScoringError):
        ScoringOptions(equivalences=({"ADVP", "PRT"}, {"PRT", "RP"}))


def test_duplicate_triples_count_as_a_multiset():
    # gold has the unary chain NP -> NP over (0,1): S(0,2) NP(0,1) NP(0,1) VP(1,2) = 4
    gold = read_tree("(S (NP (NP (NNS dogs))) (VP (VBP bark)))")
    test = read_tree("(S (NP (NNS dogs)) (VP (VBP bark)))")  # S NP VP = 3
    s = score_pair(gold, test)
    assert (s.matched, s.gold_count, s.test_count) == (3, 4, 3)  # P = 1, R = 3/4
    assert not s.exact
    as_set = score_pair(gold, test, ScoringOptions(multiset=False))
    assert as_set.exact and as_set.gold_count == 3


def test_preterminals_counted_when_asked():
    gold = read_tree("(S (NP (PRP I)) (VP (VBD ran)))")
    test = read_tree("(S (NP (NN I)) (VP (VBD ran)))")
    # + PRP(0,1) VBD(1,2) vs NN(0,1) VBD(1,2): 4 of 5
    s = score_pair(gold, test, ScoringOptions(count_preterminals=True))
    assert (s.matched, s.gold_count, s.test_count) == (4, 5, 5)
    assert (s.pos_correct, s.pos_total) == (1, 2)


def test_degenerate_no_constituents_on_both_sides_is_perfect():
    s = score_pair(read_tree("(ROOT (NN yes))"), read_tree("(ROOT (UH yes))"))
    assert (s.gold_count, s.test_count) == (0, 0)
    assert (s.precision, s.recall, s.f1, s.exact) == (1.0, 1.0, 1.0, True)


def test_degenerate_constituents_on_one_side_only_is_zero():
    s = score_pair(read_tree("(ROOT (NP (NN x)))"), read_tree("(ROOT (NN x))"))
    assert (s.gold_count, s.test_count) == (1, 0)
    assert (s.precision, s.recall, s.f1) == (0.0, 0.0, 0.0)
    r = score_pair(read_tree("(ROOT (NN x))"), read_tree("(ROOT (NP (NN x)))"))
    assert (r.precision, r.recall, r.f1) == (0.0, 0.0, 0.0)


def test_word_mismatch_names_first_differing_position():
    with pytest.raises(WordMismatchError) as err:
        score_pair(read_tree("(S (A a) (B b) (C c))"), read_tree("(S (A a) (B x) (C c))"))
    assert (err.value.index, err.value.gold_word, err.value.test_word) == (1, "b", "x")
    assert "word 2" in str(err.value)
    assert isinstance(err.value, ParserError)
    with pytest.raises(WordMismatchError) as err:
        score_pair(read_tree("(S (A a) (B b))"), read_tree("(S (A a))"))
    assert (err.value.index, err.value.gold_word, err.value.test_word) == (1, "b", None)


def test_score_corpus_micro_averages():
    easy = read_tree("(S (NP (PRP I)) (VP (VBD ran)))")
    pairs = [(GOLD, TEST), (easy, easy)]
    c = score_corpus(pairs)
    # matched 5 + 3 = 8, gold 7 + 3 = 10, test 6 + 3 = 9
    assert (c.labelled.matched, c.labelled.gold, c.labelled.test) == (8, 10, 9)
    assert c.precision == pytest.approx(8 / 9)
    assert c.recall == pytest.approx(8 / 10)
    assert c.f1 == pytest.approx(16 / 19)
    assert c.exact == 0.5 and c.sentences == 2
    assert c.mean_crossing == 0.0 and c.zero_crossing == 1.0
    assert c.pos_accuracy == 1.0
    assert c.per_label["NP"] == Counts(matched=4, gold=5, test=4)
    # unlabelled: 6 + 3 = 9 matched of gold 10, test 9
    assert (c.unlabelled.matched, c.unlabelled.gold, c.unlabelled.test) == (9, 10, 9)
    d = c.to_dict()
    assert {"precision", "recall", "f1", "exact", "sentences", "per_label", "unlabelled"} <= set(d)
    assert d["per_label"]["PP"] == {
        "precision": 0.0,
        "recall": 0.0,
        "f1": 0.0,
        "matched": 0,
        "gold": 1,
        "test": 0,
    }


def test_score_corpus_names_the_pair_whose_words_differ():
    a = read_tree("(S (A a))")
    with pytest.raises(WordMismatchError) as err:
        score_corpus([(a, a), (a, read_tree("(S (A b))"))])
    assert err.value.sentence == 2
    assert str(err.value).startswith("tree 2: ")


def test_score_corpus_of_nothing():
    c = score_corpus([])
    assert (c.sentences, c.f1, c.mean_crossing) == (0, 1.0, 0.0)
