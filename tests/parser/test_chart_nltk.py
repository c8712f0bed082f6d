"""Our Viterbi against NLTK's ViterbiParser (reference library) on GUM sentences."""

from __future__ import annotations

import math

import pytest
from nltk.parse import ViterbiParser

from parser.chart import parse
from parser.grammar import train_grammar
from parser.nltk_bridge import to_nltk
from tests.parser.gum_grammar import split_trees


@pytest.mark.slow
@pytest.mark.external
def test_chart_viterbi_equals_nltk_on_gum_sentences() -> None:
    # Reference library: NLTK's ViterbiParser, same grammar (converted by parser.nltk_bridge).
    # Open data set: GUM (Zeldes 2017). NLTK is slow, so the grammar is a small one (no parent
    # annotation of phrases or tags, no features, trained on the first 250 training trees;
    # still 551 binary rules, 182 unary ones, unary chains and a smoothed lexicon) and the
    # sentences are short: 27 of 5 to 8 words, then one each of 9-10, 11-12 and 13-14 words
    # (longer ones cost NLTK seconds each and check nothing the shorter ones do not: the same
    # rules at more split points).
    train, _ = split_trees()
    small = list(train[:250])
    g = train_grammar(small, horizontal=0, vertical=1, tag_ancestors=0, features=())
    # The sentences come from the first 500 trees: some words are unknown to the grammar, which
    # checks the smoothed lexicon's unknown-word classes against NLTK too.
    pool = list(train[:500])
    sentences = [t.leaves() for t in pool if 5 <= len(t.leaves()) <= 8][:27]
    for lo, hi in ((9, 10), (11, 12), (13, 14)):
        sentences += [t.leaves() for t in pool if lo <= len(t.leaves()) <= hi][:1]
    assert len(sentences) >= 30
    for words in sentences:
        pcfg, tokens = to_nltk(g, [words])
        ref = list(ViterbiParser(pcfg, max_time=None).parse(tokens[0]))
        ours = parse(g, words)
        assert ref, words
        assert not ours.fallback
        # NLTK reports base-2 log-probabilities.
        assert math.isclose(
            ref[0].logprob() * math.log(2), ours.logprobs[0], rel_tol=1e-12, abs_tol=1e-9
        ), words
