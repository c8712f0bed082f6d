"""Convert a Treewright grammar into an NLTK ``PCFG`` over the same derivations, for
cross-checking our chart against NLTK's parsers (reference library) in tests and benchmarks.

What it computes: :func:`to_nltk` builds productions ``T<a> -> B<b>`` for identity edges,
``T<a> -> E<e>`` and ``E<e> -> B<b>`` (probability 1) for each unary chain e (so two chains
between the same symbols stay two derivations), ``B<a> -> T<b> T<c>`` for binary rules, and
``B<t> -> 'c<col>'`` for the lexicon columns the given sentences use, plus one ``'<other>'``
terminal carrying the rest of each tag's mass so every left-hand side still sums to one.
Sentences are rewritten as column tokens (``c123``), so unknown words map to their signature.

Complexity: O(rules + tags x distinct columns). Limits: NLTK's own parsers are pure Python
and slow; keep sentences short.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from nltk import Nonterminal
from nltk.grammar import PCFG, ProbabilisticProduction

from parser.grammar import Grammar

_LOG2 = math.log(2.0)


def to_nltk(g: Grammar, sentences: Sequence[Sequence[str]]) -> tuple[PCFG, list[list[str]]]:
    """An NLTK PCFG equivalent to ``g`` on ``sentences``, and the sentences as its tokens."""

    def top(a: int) -> Nonterminal:
        return Nonterminal(f"T{a}")

    def bot(a: int) -> Nonterminal:
        return Nonterminal(f"B{a}")

    prods: list[ProbabilisticProduction] = []

    def add(lhs: Nonterminal, rhs: tuple[Any, ...], logp: float) -> None:
        prods.append(ProbabilisticProduction(lhs, rhs, logprob=logp / _LOG2))

    for e, (a, b, lp) in enumerate(zip(g.un_parent, g.un_child, g.un_logp, strict=True)):
        if len(g.chains[g.un_chain[e]]) == 1:
            add(top(a), (bot(b),), float(lp))
        else:
            mid = Nonterminal(f"E{e}")
            add(top(a), (mid,), float(lp))
            add(mid, (bot(b),), 0.0)
    for a, left, right, lp in zip(g.bin_parent, g.bin_left, g.bin_right, g.bin_logp, strict=True):
        add(bot(a), (top(left), top(right)), float(lp))
    tokens: list[list[str]] = []
    used: set[int] = set()
    for words in sentences:
        cols = [g.word_column(w, i == 0) for i, w in enumerate(words)]
        tokens.append([f"c{c}" for c in cols])
        used.update(c for c in cols if c >= 0)
    cols_sorted = sorted(used)
    for row, a in enumerate(g.lex_symbols):
        total = float(np.exp(np.logaddexp.reduce(g.lex_logp[row])))
        taken = 0.0
        for c in cols_sorted:
            lp = float(g.lex_logp[row, c])
            if lp > -math.inf:
                add(bot(a), (f"c{c}",), lp)
                taken += math.exp(lp)
        rest = total - taken
        if rest > 1e-12:
            add(bot(a), ("<other>",), math.log(rest))
    return PCFG(top(g.start), prods), tokens
