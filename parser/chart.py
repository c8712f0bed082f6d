"""Parse a sentence with a PCFG: Viterbi, lazy k-best, inside probability, span posteriors,
under constraints, with a well-formed fallback when no tree fits.

What it computes (model: :mod:`parser.grammar`; compiled loops: :mod:`parser.kernels`)
    * the Viterbi best derivation by CKY in log space (exact: the only rules skipped are those
      a bound proves cannot win);
    * the k best derivations by lazy k-best extraction (Huang and Chiang 2005, algorithm 3) on
      the Viterbi chart (:mod:`parser.kbest`), un-binarized, keeping the first (best)
      derivation of each distinct tree;
    * the sentence's inside log-probability and, by inside-outside (Lari and Young 1990), the
      posterior probability of every labelled span (labels of the user's label set, i.e. with
      annotations removed), each conditioned on the constraints;
    * with the posteriors, the consensus tree of :mod:`parser.consensus` (the brackets most
      likely under all derivations, Goodman 1996), the most accurate single suggestion;
    * constraints, honoured exactly by all of the above: required spans (a constituent with the
      given label, or any constituent, spans exactly those words), forbidden spans (no
      constituent spans them), fixed POS tags.

A required span rules out every node crossing it; in a binary tree, a span that no node crosses
is itself a node, so that plus a check on the labels the span's node (or its unary chain)
carries is exact. A binarization node (``@...``) is not a constituent.

Complexity: O(n^3 R) per chart pass (R binary rules); k-best adds O(k n log k) node visits,
each a vectorized scan of one node's incoming rules. Memory O(n^2 N) (N symbols).
Limits: one sentence per call (see :mod:`parser.batch` for many).
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any, cast

import numpy as np
from nltk import Tree

from parser import kernels
from parser.binarize import base_label, unbinarize
from parser.consensus import DEFAULT_COST, consensus_tree
from parser.errors import ConstraintError, ParserError
from parser.grammar import Grammar
from parser.kbest import TOP, LazyKBest, open_chain, tree_key
from parser.trees import tree_from_spans

POSTERIOR_THRESHOLD = 1e-3
#: Coarse-to-fine pruning of a refined grammar's chart (Petrov and Klein 2007, "Improved
#: inference for unlexicalized parsing", NAACL; they prune at posteriors of about 1e-4, from
#: memory): a sub-symbol of a span is left out when its ancestor's posterior under the
#: projection onto the level before (:func:`pruning_mask`: the base symbols, then each
#: split-merge cycle's sub-symbols) is at most this. Required spans are never pruned, and a
#: pruned chart without a tree is parsed again unpruned.
REFINED_PRUNE = 1e-4
#: A refined grammar's k-best search looks at this many times more derivations (each tree has
#: one per choice of sub-symbols). Measured (refined 4 cycles on the GUM split, single thread):
#: with 4, the Bench's 30 readings under two pins and a fixed tag found 73 distinct trees on
#: five 30-word test sentences (8 to 21 each), with 8, 100 (10 to 30), 169 against 173 ms
#: median; k = 10 with posteriors on twelve 20- and 30-word sentences, 112 and 118 of 120
#: trees at 121 and 120-125 ms; with 16, 129 of 150 readings at 223 ms.
REFINED_KBEST_FACTOR = 8
#: :func:`parse_family`'s pruning: a cell of a later grammar is left out when its symbol's
#: posterior under the first grammar is at most this (the refined grammars' threshold). On
#: GUM interview, 300 in-domain trees and the other genres as reference, the grid of
#: parser.adapt scored on 30 held-out trees moved by at most 0.0008 F1 and kept its order,
#: at a third of the CPU time per pruned grammar (bench/cold_start.py).
FAMILY_PRUNE = REFINED_PRUNE
#: The longest sentence the library is tested at (the Viterbi tree, k-best, posteriors and the
#: consensus tree; none of them recurses, so nothing here depends on Python's recursion limit).
#: Imports refuse longer sentences. Time grows as n^3: see DEVELOPERS.md, "Sentence length".
MAX_WORDS = 250


@dataclass(frozen=True)
class Constraints:
    """What a parse must respect. Spans are 0-based (start, end), end exclusive.

    required: (start, end, label or None): a constituent with that label (None: any label)
        spans exactly those words; forbidden: no constituent spans exactly those words;
    tags: one POS tag or None per word (or an empty list for no fixed tags). With a trained
        (smoothed) grammar a fixed tag the lexicon gives no probability for that word emits it
        with probability 1e-12 instead, so gold tags never make a sentence unparsable; with a
        grammar from explicit rules the rules are taken literally.
    relabel_backoff: None keeps required labels strict; a probability p lets any node over a
        required span stand in for its required label at a factor p (the relabel back-off):
        a label the grammar cannot build over those words then costs p instead of the whole
        parse. The trees returned then carry the stand-in's label; the caller relabels.
    """

    required: Sequence[tuple[int, int, str | None]] = ()
    forbidden: Sequence[tuple[int, int]] = ()
    tags: Sequence[str | None] = ()
    relabel_backoff: float | None = None


@dataclass
class ParseResult:
    """Trees best first (distinct), their log-probabilities, and the other outputs of parse."""

    trees: list[Tree]
    logprobs: list[float]
    inside_logprob: float | None = None
    posteriors: list[tuple[str, int, int, float]] = field(default_factory=list)
    fallback: bool = False
    seconds: float = 0.0
    #: The consensus tree (:mod:`parser.consensus`), computed with the posteriors; None
    #: without posteriors or for a fallback.
    consensus: Tree | None = None
    #: With the posteriors: per word, {POS tag: posterior} for tags above the threshold.
    tag_posteriors: list[dict[str, float]] = field(default_factory=list)
    #: With ``max_rule``: the max-rule-product tree (:meth:`_Chart.max_rule_tree`); None
    #: otherwise or when it has none.
    max_rule: Tree | None = None


class _Tables:
    """Grammar arrays arranged for the chart (built once per grammar, then cached)."""

    def __init__(self, g: Grammar) -> None:
        n = g.n_symbols
        order = np.lexsort((g.bin_right, g.bin_left))
        self.lo_left = g.bin_left[order]
        self.lo_right = np.ascontiguousarray(g.bin_right[order])
        self.lo_parent = np.ascontiguousarray(g.bin_parent[order])
        self.lo_logp = np.ascontiguousarray(g.bin_logp[order])
        self.lo_w = np.exp(self.lo_logp)
        # Distinct (left, right) pairs of the rules in this order, and each pair's rule range.
        first = np.ones(len(self.lo_left), dtype=bool)
        first[1:] = (self.lo_left[1:] != self.lo_left[:-1]) | (
            self.lo_right[1:] != self.lo_right[:-1]
        )
        starts = np.flatnonzero(first)
        self.pair_left = np.ascontiguousarray(self.lo_left[starts])
        self.pair_right = np.ascontiguousarray(self.lo_right[starts])
        self.pair_off = np.append(starts, len(self.lo_left)).astype(np.int64)
        order = np.lexsort((g.bin_right, g.bin_left, g.bin_parent))
        self.po_parent = g.bin_parent[order]
        self.po_left = np.ascontiguousarray(g.bin_left[order])
        self.po_right = np.ascontiguousarray(g.bin_right[order])
        self.po_logp = np.ascontiguousarray(g.bin_logp[order])
        self.po_w = np.exp(self.po_logp)
        self.po_off = _offsets(self.po_parent, n)
        order = np.argsort(g.un_parent, kind="stable")
        self.up = np.ascontiguousarray(g.un_parent[order])
        self.uc = np.ascontiguousarray(g.un_child[order])
        self.uchain = g.un_chain[order]
        self.ulogp = np.ascontiguousarray(g.un_logp[order])
        self.uw = np.exp(self.ulogp)
        self.u_off = _offsets(self.up, n)
        # Label sets of each edge: kind 0 (one-word span: the bottom is a preterminal) and
        # kind 1 (longer span: the bottom branches and counts unless it is intermediate).
        self.labels = list(g.labels)
        label_id = {lab: i for i, lab in enumerate(self.labels)}
        n_edge = len(self.up)
        self.haslab = np.zeros((n_edge, 2, len(self.labels)), dtype=np.bool_)
        lab_ids: list[int] = []
        lab_off = [0]
        for e in range(n_edge):
            chain = g.chains[self.uchain[e]]
            for kind in (0, 1):
                nodes = chain if kind == 1 else chain[:-1]
                ids = sorted(
                    {
                        label_id[base_label(x)]
                        for x in nodes
                        if not x.startswith("@") and base_label(x) in label_id
                    }
                )
                self.haslab[e, kind, ids] = True
                lab_ids.extend(ids)
                lab_off.append(len(lab_ids))
        self.nonempty: np.ndarray = np.asarray(self.haslab.any(axis=2))
        self.lab_ids = np.array(lab_ids, dtype=np.int32)
        self.lab_off = np.array(lab_off, dtype=np.int64)
        self.tag_symbols: dict[str, np.ndarray] = {}
        for t in g.tags:
            self.tag_symbols[t] = np.array(
                [s for s in g.lex_symbols if g.base[s] == t], dtype=np.int64
            )


def _offsets(sorted_keys: np.ndarray, n: int) -> np.ndarray:
    return np.searchsorted(sorted_keys, np.arange(n + 1)).astype(np.int64)


def tables(g: Grammar) -> _Tables:
    """The chart's view of ``g`` (cached on the grammar object)."""
    t = g.__dict__.get("_chart_tables")
    if t is None:
        t = _Tables(g)
        g.__dict__["_chart_tables"] = t
    return t


def span_ids(n: int) -> np.ndarray:
    """int32[n + 1, n + 1]: id of span (i, k), ordered by length then start; -1 elsewhere."""
    sid = np.full((n + 1, n + 1), -1, dtype=np.int32)
    s = 0
    for length in range(1, n + 1):
        for i in range(n - length + 1):
            sid[i, i + length] = s
            s += 1
    return sid


@dataclass
class _Problem:
    n: int
    sid: np.ndarray
    dead: np.ndarray
    code: np.ndarray
    req_off: np.ndarray
    req_lab: np.ndarray
    lex: np.ndarray
    satisfiable: bool
    required: list[tuple[int, int, str | None]]
    tags: list[str | None]
    backoff: float = kernels.NEG


def _prepare(
    g: Grammar, tab: _Tables, words: Sequence[str], constraints: Constraints | None
) -> _Problem:
    n = len(words)
    c = constraints or Constraints()
    required = [(int(a), int(b), lab) for a, b, lab in c.required]
    forbidden = [(int(a), int(b)) for a, b in c.forbidden]
    tags: list[str | None] = list(c.tags) if c.tags else [None] * n
    if len(tags) != n:
        raise ConstraintError(f"{len(tags)} fixed tags given for {n} words")
    for a, b, lab in required:
        if not 0 <= a < b <= n:
            raise ConstraintError(f"required span ({a}, {b}) is outside 0..{n}")
        if lab is not None and not isinstance(lab, str):
            raise ConstraintError(f"required span ({a}, {b}) has a label that is not a string")
    for a, b in forbidden:
        if not 0 <= a < b <= n:
            raise ConstraintError(f"forbidden span ({a}, {b}) is outside 0..{n}")
        if (a, b) == (0, n):
            raise ConstraintError(f"forbidden span ({a}, {b}) covers the whole sentence")
    req_spans = {(a, b) for a, b, _ in required}
    for a, b in forbidden:
        if (a, b) in req_spans:
            raise ConstraintError(f"span ({a}, {b}) is both required and forbidden")
    for x, (a, b, _) in enumerate(required):
        for c2, d, _ in required[x + 1 :]:
            if a < c2 < b < d or c2 < a < d < b:
                raise ConstraintError(f"required spans ({a}, {b}) and ({c2}, {d}) cross")
    sid = span_ids(n)
    n_span = n * (n + 1) // 2
    starts = np.empty(n_span, dtype=np.int64)
    ends = np.empty(n_span, dtype=np.int64)
    ii, kk = np.nonzero(sid >= 0)
    starts[sid[ii, kk]] = ii
    ends[sid[ii, kk]] = kk
    dead = np.zeros(n_span, dtype=np.bool_)
    code = np.full(n_span, -1, dtype=np.int32)
    satisfiable = True
    label_id = {lab: i for i, lab in enumerate(tab.labels)}
    per_span: dict[int, list[int]] = {}
    for a, b, lab in required:
        dead |= ((starts < a) & (a < ends) & (ends < b)) | (
            (a < starts) & (starts < b) & (b < ends)
        )
        s = int(sid[a, b])
        per_span.setdefault(s, [])
        if lab is not None:
            if lab in label_id:
                per_span[s].append(label_id[lab])
            elif c.relabel_backoff is None:
                satisfiable = False
            # with the back-off, a label the grammar lacks asks for any node over the span
    for a, b in forbidden:
        code[sid[a, b]] = -2
    req_off = np.zeros(n_span + 1, dtype=np.int64)
    req_lab_list: list[int] = []
    for s in range(n_span):
        if s in per_span:
            code[s] = 0
            req_lab_list.extend(sorted(set(per_span[s])))
        req_off[s + 1] = len(req_lab_list)
    lex = g.lexical_scores(words)
    smoothed = g.meta.get("signature_scheme") not in (None, "none")
    for i, tag in enumerate(tags):
        if tag is None:
            continue
        allowed = tab.tag_symbols.get(tag)
        if allowed is None:
            satisfiable = False
            continue
        # A fixed tag lets every derivation emit word i from that tag; the emission factor is
        # then common to all of them, so any positive value keeps the ranking and posteriors.
        keep = lex[i, allowed]
        if smoothed:
            keep = np.where(np.isfinite(keep), keep, _FIXED_TAG_FLOOR)
        lex[i, :] = -np.inf
        lex[i, allowed] = keep
    backoff = kernels.NEG
    if c.relabel_backoff is not None:
        if not 0.0 < c.relabel_backoff < 1.0:
            raise ConstraintError(f"relabel back-off {c.relabel_backoff} is not in (0, 1)")
        backoff = math.log(c.relabel_backoff)
    return _Problem(
        n=n,
        sid=sid,
        dead=dead,
        code=code,
        req_off=req_off,
        req_lab=np.array(req_lab_list, dtype=np.int32),
        lex=lex,
        satisfiable=satisfiable,
        required=required,
        tags=tags,
        backoff=backoff,
    )


_FIXED_TAG_FLOOR = math.log(1e-12)


def parse(
    g: Grammar,
    words: Sequence[str],
    k: int = 1,
    posteriors: bool = False,
    constraints: Constraints | None = None,
    posterior_threshold: float = POSTERIOR_THRESHOLD,
    consensus_cost: float = DEFAULT_COST,
    prune: float | None = REFINED_PRUNE,
    max_rule: bool = False,
) -> ParseResult:
    """Parse ``words``; see the module docstring. Raises ConstraintError for malformed
    constraints and ParserError for an empty sentence; never for ordinary words.

    With ``posteriors`` the result also holds the consensus tree (:mod:`parser.consensus`,
    bracket cost ``consensus_cost``); ``posterior_threshold`` must stay below that cost.
    A refined grammar (:mod:`parser.latent`) is parsed coarse-to-fine with the pruning
    threshold ``prune`` (None: its full chart, exact). With ``max_rule`` the result also
    holds the max-rule-product tree (one more pass over the chart)."""
    t0 = time.perf_counter()
    words = [str(w) for w in words]
    if not words:
        raise ParserError("cannot parse an empty sentence")
    if k < 1:
        raise ParserError(f"k must be at least 1, got {k}")
    if posteriors and not posterior_threshold < consensus_cost:
        raise ParserError(
            f"posterior threshold {posterior_threshold} must be below the "
            f"consensus cost {consensus_cost}"
        )
    tab = tables(g)
    prob = _prepare(g, tab, words, constraints)
    chart = _fine_chart(g, tab, prob, words, constraints, prune) if prob.satisfiable else None
    return _result(
        g, prob, chart, words, k, posteriors, posterior_threshold, consensus_cost, t0, max_rule
    )


def _result(
    g: Grammar,
    prob: _Problem,
    chart: _Chart | None,
    words: list[str],
    k: int,
    posteriors: bool,
    posterior_threshold: float,
    consensus_cost: float,
    t0: float,
    max_rule: bool = False,
) -> ParseResult:
    """What :func:`parse` returns for a chart already filled (a fallback tree without one)."""
    if chart is None or not chart.ok:
        tree = fallback_tree(g, words, prob)
        return ParseResult(
            trees=[tree],
            logprobs=[-math.inf],
            inside_logprob=None,
            posteriors=[],
            fallback=True,
            seconds=time.perf_counter() - t0,
        )
    if k == 1:
        trees = [chart.viterbi_tree(words)]
        logprobs = [chart.best]
    else:
        trees, logprobs = chart.kbest(words, k)
    result = ParseResult(trees=trees, logprobs=logprobs)
    if posteriors:
        result.inside_logprob, result.posteriors = chart.posteriors(posterior_threshold)
        result.tag_posteriors = chart.tag_posteriors
        result.consensus = consensus_tree(
            words,
            [tag for _, tag in trees[0].pos()],
            result.posteriors,
            g.root_label,
            required=prob.required,
            cost=consensus_cost,
        )
    if max_rule:
        result.max_rule = chart.max_rule_tree(words)
    result.seconds = time.perf_counter() - t0
    return result


def parse_family(
    grammars: Sequence[Grammar],
    words: Sequence[str],
    prune: float = FAMILY_PRUNE,
    posterior_threshold: float = POSTERIOR_THRESHOLD,
    consensus_cost: float = DEFAULT_COST,
) -> list[ParseResult]:
    """``parse(g, words, posteriors=True)`` for each grammar of a family that shares its
    symbols (grammars estimated from the same counts with different weights), sharing work:
    the first grammar's chart is complete, and each other grammar's chart leaves out the
    (span, symbol) cells whose symbol of the same name has a posterior of at most ``prune``
    under the first grammar (a symbol the first grammar lacks is kept everywhere). That is
    coarse-to-fine pruning with the first grammar as the coarse pass (Petrov and Klein 2007,
    from memory) and it is not exact: a pruned cell may hold part of a later grammar's best
    analysis. A pruned chart without a tree is parsed again in full.

    Cost: one complete parse (its outside pass also gives the symbol posteriors) plus, per
    other grammar, a pruned parse, about a third of a complete one on GUM grammars at 1e-4
    (bench/cold_start.py). A refined (latent) first grammar is parsed in full, not
    coarse-to-fine."""
    t0 = time.perf_counter()
    words = [str(w) for w in words]
    if not words:
        raise ParserError("cannot parse an empty sentence")
    if not grammars:
        return []
    first = grammars[0]
    tab = tables(first)
    prob = _prepare(first, tab, words, None)
    chart = _Chart(first, tab, prob)
    spost: np.ndarray | None = None
    if chart.ok:
        chart.keep_symbol_posteriors = True
    out = [_result(first, prob, chart, words, 1, True, posterior_threshold, consensus_cost, t0)]
    if chart.ok:
        spost = chart.symbol_posteriors()  # from the outside pass just run
    index = {name: i for i, name in enumerate(first.symbols)}
    for g in grammars[1:]:
        t1 = time.perf_counter()
        gtab = tables(g)
        gprob = _prepare(g, gtab, words, None)
        gchart: _Chart | None = None
        if spost is not None:
            if g.symbols == first.symbols:
                allow = spost > prune
            else:
                cols = np.array([index.get(name, -1) for name in g.symbols], dtype=np.int64)
                allow = spost[:, np.maximum(cols, 0)] > prune
                allow[:, cols < 0] = True
            gchart = _Chart(g, gtab, gprob, np.ascontiguousarray(allow))
        if gchart is None or not gchart.ok:
            gchart = _Chart(g, gtab, gprob)
        out.append(
            _result(g, gprob, gchart, words, 1, True, posterior_threshold, consensus_cost, t1)
        )
    return out


def inside_logprob(
    g: Grammar, words: Sequence[str], constraints: Constraints | None = None
) -> float:
    """log of the total probability of all trees of ``words`` (that satisfy the constraints);
    -inf when there is none."""
    tab = tables(g)
    prob = _prepare(g, tab, [str(w) for w in words], constraints)
    if not prob.satisfiable:
        return -math.inf
    chart = _Chart(g, tab, prob)
    if not chart.ok:
        return -math.inf
    return chart.inside()


def tree_entropy(g: Grammar, words: Sequence[str], step: float = 1e-3) -> float:
    """Entropy in nats of the distribution over the derivations of ``words`` (Hwa 2004, "Sample
    selection for statistical parsing", Computational Linguistics 30(3): the tree entropy that
    ranks sentences for annotation); ``math.nan`` when the grammar has no tree for them.

    H = log Z - E[log p(t)] with Z the inside probability of the sentence. The expectation is
    the derivative of log Z(b), Z(b) = sum over derivations of p(t)^b, at b = 1 (the same
    expected rule counts an outside pass gives, summed with their log-probabilities), taken by
    a central difference of two more inside passes with every log-probability scaled by
    1 +- ``step``; the error is O(step^2). Cost: a Viterbi pass (which spans hold a tree) and
    three inside passes.
    """
    words = [str(w) for w in words]
    if not words:
        raise ParserError("cannot parse an empty sentence")
    tab = tables(g)
    prob = _prepare(g, tab, words, None)
    chart = _fine_chart(g, tab, prob, words, None, REFINED_PRUNE)
    if not chart.ok:
        return math.nan
    live = np.maximum(chart.vt, kernels.NEG)

    def log_z(b: float) -> float:
        it, _, sigma, _, _ = kernels.inside(
            prob.n,
            g.n_symbols,
            prob.sid,
            prob.dead,
            prob.code,
            prob.req_off,
            prob.req_lab,
            np.maximum(prob.lex * b, kernels.NEG),
            live,
            tab.pair_left,
            tab.pair_right,
            tab.pair_off,
            tab.lo_parent,
            tab.lo_w**b,
            tab.up,
            tab.uc,
            tab.uw**b,
            tab.nonempty,
            tab.haslab,
            prob.backoff,
            chart.allow,
            chart.use_allow,
        )
        return float(np.log(it[chart.full, g.start]) + sigma[chart.full])

    expected_logp = (log_z(1.0 + step) - log_z(1.0 - step)) / (2.0 * step)
    return max(0.0, log_z(1.0) - expected_logp)


def pruning_mask(
    g: Grammar,
    words: Sequence[str],
    constraints: Constraints | None,
    threshold: float,
) -> np.ndarray | None:
    """bool[S, N]: the (span, symbol) cells of refined grammar ``g`` kept by coarse-to-fine
    pruning (see :data:`REFINED_PRUNE`). The projections of ``g`` onto the levels of its cycle
    hierarchy (:func:`parser.latent.level_grammar`: the base symbols, then the sub-symbols
    after each split-merge cycle) are parsed in turn under the same constraints, each level's
    chart keeping only the cells whose parent sub-symbol has a posterior above ``threshold``
    in the level before; the last level's posteriors give the mask of ``g``. Every cell of a
    required span is kept at every level. A grammar saved without its hierarchy has one level
    (the base symbols). When a level after the first has no tree, the last level that had one
    gives the mask; None when the first has none."""
    from parser.latent import level_grammar, n_levels

    spost: np.ndarray | None = None
    to_prev: np.ndarray | None = None  # symbol of g -> its ancestor at the level parsed last
    required: list[tuple[int, int, str | None]] = []
    sid: np.ndarray | None = None
    for level in range(max(1, n_levels(g))):
        lgram, to_level = level_grammar(g, level)
        ltab = tables(lgram)
        lprob = _prepare(lgram, ltab, words, constraints)
        if not lprob.satisfiable:
            return None
        required, sid = lprob.required, lprob.sid
        allow: np.ndarray | None = None
        if spost is not None and to_prev is not None:
            parent = np.zeros(lgram.n_symbols, dtype=np.int64)
            parent[to_level] = to_prev
            allow = _keep(spost[:, parent] > threshold, required, sid)
        level_post = _Chart.symbol_posteriors_only(lgram, ltab, lprob, allow)
        if level_post is None:
            if spost is None:
                return None
            break
        spost, to_prev = level_post, to_level
    assert spost is not None and to_prev is not None and sid is not None
    return _keep(spost[:, to_prev] > threshold, required, sid)


def _keep(
    allow: np.ndarray, required: Sequence[tuple[int, int, str | None]], sid: np.ndarray
) -> np.ndarray:
    """``allow`` with every cell of the required spans kept."""
    for a, b, _ in required:
        allow[sid[a, b], :] = True
    return np.ascontiguousarray(allow)


def _fine_chart(
    g: Grammar,
    tab: _Tables,
    prob: _Problem,
    words: Sequence[str],
    constraints: Constraints | None,
    prune: float | None,
) -> _Chart:
    """The chart of ``g``; coarse-to-fine for a refined grammar when ``prune`` is set, and
    again unpruned if pruning left no tree."""
    if prune is not None and "latent" in g.meta:
        allow = pruning_mask(g, words, constraints, prune)
        if allow is not None:
            chart = _Chart(g, tab, prob, allow)
            if chart.ok:
                return chart
    return _Chart(g, tab, prob)


_NO_MASK = np.ones((1, 1), dtype=np.bool_)


def _run(kernel: Any, *args: Any) -> Any:
    """``kernel(*args)`` (numba's dispatcher type takes no unpacked arguments)."""
    return kernel(*args)


class _Chart:
    def __init__(
        self, g: Grammar, tab: _Tables, p: _Problem, allow: np.ndarray | None = None
    ) -> None:
        self._setup(g, tab, p, allow)
        (self.vt, self.vb, self.bp_rule, self.bp_edge, self.VL, self.VR) = kernels.viterbi(
            p.n,
            g.n_symbols,
            p.sid,
            p.dead,
            p.code,
            p.req_off,
            p.req_lab,
            np.maximum(p.lex, kernels.NEG),
            tab.pair_left,
            tab.pair_right,
            tab.pair_off,
            tab.lo_parent,
            tab.lo_logp,
            tab.up,
            tab.uc,
            tab.ulogp,
            tab.nonempty,
            tab.haslab,
            p.backoff,
            self.allow,
            self.use_allow,
        )
        for arr in (self.vt, self.vb):
            arr[arr <= kernels.LOW] = -np.inf
        self.best = float(self.vt[self.full, g.start])
        self.ok = self.best > -math.inf

    def _setup(self, g: Grammar, tab: _Tables, p: _Problem, allow: np.ndarray | None) -> None:
        """What every chart holds before its passes (the full chart's and a coarse level's)."""
        self.g, self.tab, self.p = g, tab, p
        self.allow = _NO_MASK if allow is None else allow
        self.use_allow = allow is not None
        self.full = int(p.sid[0, p.n])
        self._inside: tuple[np.ndarray, ...] | None = None
        self._outside_cache: tuple[bool, tuple[np.ndarray, ...]] | None = None
        self.tag_posteriors: list[dict[str, float]] = []
        self.keep_symbol_posteriors = False

    @classmethod
    def symbol_posteriors_only(
        cls, g: Grammar, tab: _Tables, p: _Problem, allow: np.ndarray | None
    ) -> np.ndarray | None:
        """:meth:`symbol_posteriors` of the chart of ``g`` without its Viterbi pass (a coarse
        level of coarse-to-fine parsing needs only its posteriors); None when it has no tree."""
        chart = cls.__new__(cls)
        chart._setup(g, tab, p, allow)
        # Zeros: every span may hold something; the inside pass finds which do.
        chart.vt = np.zeros((p.n * (p.n + 1) // 2, g.n_symbols))
        it = chart._inside_chart()[0]
        if not it[chart.full, g.start] > 0.0:
            return None
        return chart.symbol_posteriors()

    # ------------------------------------------------------------- Viterbi tree
    def viterbi_tree(self, words: Sequence[str]) -> Tree:
        """The best derivation's tree, built without recursion (any sentence length)."""
        holder: list[Tree] = []
        todo: list[tuple[int, int, int, list[Any]]] = [(0, self.p.n, self.g.start, holder)]
        while todo:
            i, k, a, out = todo.pop()
            s = self.p.sid[i, k]
            e = int(self.bp_edge[s, a])
            top_node, low = open_chain(self.g.chains[self.tab.uchain[e]], [])
            out.append(top_node)
            if k - i == 1:
                low.append(words[i])
                continue
            b = int(self.tab.uc[e])
            r = int(self.bp_rule[s, b])
            left = int(self.tab.lo_left[r])
            right = int(self.tab.lo_right[r])
            # The split point is the first one reaching the rule's best score (as in the kernel).
            j = i + 1 + int(np.argmax(self.VL[i, left, i + 1 : k] + self.VR[k, right, i + 1 : k]))
            todo.append((j, k, right, low))  # the stack takes the left child up first
            todo.append((i, j, left, low))
        return unbinarize(holder[0])

    # ------------------------------------------------------------- inside / outside
    def _span_data(self) -> tuple[Any, ...]:
        """The leading arguments of the inside and max-rule kernels (sentence and constraints)."""
        p = self.p
        return p.n, self.g.n_symbols, p.sid, p.dead, p.code, p.req_off, p.req_lab

    def _inside_chart(self) -> tuple[np.ndarray, ...]:
        if self._inside is None:
            p, tab = self.p, self.tab
            self._inside = _run(
                kernels.inside,
                *self._span_data(),
                np.maximum(p.lex, kernels.NEG),
                np.maximum(self.vt, kernels.NEG),
                tab.pair_left,
                tab.pair_right,
                tab.pair_off,
                tab.lo_parent,
                tab.lo_w,
                tab.up,
                tab.uc,
                tab.uw,
                tab.nonempty,
                tab.haslab,
                p.backoff,
                self.allow,
                self.use_allow,
            )
        return self._inside

    def inside(self) -> float:
        it, _, sigma, _, _ = self._inside_chart()
        return float(np.log(it[self.full, self.g.start]) + sigma[self.full])

    def _outside(self, want_symbols: bool) -> tuple[np.ndarray, ...]:
        if self._outside_cache is not None and (not want_symbols or self._outside_cache[0]):
            return self._outside_cache[1]
        it, ib, sigma, il, ir = self._inside_chart()
        p, tab = self.p, self.tab
        out: tuple[np.ndarray, ...] = kernels.outside(
            p.n,
            self.g.n_symbols,
            self.g.start,
            p.sid,
            p.dead,
            p.code,
            p.req_off,
            p.req_lab,
            it,
            ib,
            sigma,
            il,
            ir,
            tab.pair_left,
            tab.pair_right,
            tab.pair_off,
            tab.lo_parent,
            tab.lo_w,
            tab.up,
            tab.uc,
            tab.uw,
            tab.nonempty,
            tab.haslab,
            tab.lab_off,
            tab.lab_ids,
            len(tab.labels),
            p.backoff,
            want_symbols,
        )
        self._outside_cache = (want_symbols, out)
        return out

    def symbol_posteriors(self) -> np.ndarray:
        """float64[S, N]: per span and symbol, the larger of its top and bottom node's
        posterior."""
        return self._outside(True)[2]

    def posteriors(self, threshold: float) -> tuple[float, list[tuple[str, int, int, float]]]:
        """(inside log-probability, labelled span posteriors above ``threshold``); with
        ``keep_symbol_posteriors`` set, the same outside pass also computes (and caches)
        :meth:`symbol_posteriors`."""
        post, tpost = self._outside(self.keep_symbol_posteriors)[:2]
        p, tab = self.p, self.tab
        self.tag_posteriors = []
        for i in range(p.n):
            per: dict[str, float] = {}
            row = tpost[i]
            for sym in np.flatnonzero(row > 0.0):
                tag = self.g.base[int(sym)]
                per[tag] = per.get(tag, 0.0) + float(row[sym])
            self.tag_posteriors.append({t: min(1.0, v) for t, v in per.items() if v > threshold})
        spans, labs = np.nonzero(post > threshold)
        ii, kk = np.nonzero(p.sid >= 0)
        start = np.empty(len(ii), dtype=np.int64)
        end = np.empty(len(ii), dtype=np.int64)
        start[p.sid[ii, kk]] = ii
        end[p.sid[ii, kk]] = kk
        out = [
            (tab.labels[b], int(start[s]), int(end[s]), min(1.0, float(post[s, b])))
            for s, b in zip(spans, labs, strict=True)
        ]
        out.sort(key=lambda x: (x[1], -x[2], x[0]))
        return self.inside(), out

    # ------------------------------------------------------------- max-rule
    def max_rule_tree(self, words: Sequence[str]) -> Tree | None:
        """The max-rule-product tree (:func:`parser.kernels.max_rule`) over the coarse
        symbols of :func:`max_rule_tables` (a refined grammar's base symbols; a plain
        grammar's own); None when no tree of positive posterior rules exists."""
        it, ib, sigma, il, ir = self._inside_chart()
        OL, OR = self._outside(False)[3:5]
        p, tab = self.p, self.tab
        m = max_rule_tables(self.g)
        MT, _, bp_rule, bp_split, bp_edge = _run(
            kernels.max_rule,
            *self._span_data(),
            ib,
            sigma,
            il,
            ir,
            OL,
            OR,
            tab.pair_left,
            tab.pair_right,
            tab.pair_off,
            m.g_off,
            m.g_rules,
            m.g_coarse,
            m.r_parent,
            m.r_w,
            tab.up,
            tab.uc,
            tab.uw,
            m.e_coarse,
            tab.nonempty,
            tab.haslab,
            p.backoff,
            m.to_coarse,
            m.n_coarse,
            m.c_parent,
            m.c_left,
            m.c_right,
            m.ce_parent,
            m.ce_child,
        )
        if MT[self.full, m.start] <= kernels.LOW:
            return None
        holder: list[Tree] = []
        todo: list[tuple[int, int, int, list[Any]]] = [(0, p.n, m.start, holder)]
        while todo:
            i, k, a, out = todo.pop()
            s = p.sid[i, k]
            ce = int(bp_edge[s, a])
            top_node, low = open_chain(self.g.chains[m.ce_chain[ce]], [])
            out.append(top_node)
            if k - i == 1:
                low.append(words[i])
                continue
            b = int(m.ce_child[ce])
            cr = int(bp_rule[s, b])
            j = int(bp_split[s, b])
            todo.append((j, k, int(m.c_right[cr]), low))
            todo.append((i, j, int(m.c_left[cr]), low))
        return unbinarize(holder[0])

    # ------------------------------------------------------------- k-best
    def kbest(self, words: Sequence[str], k: int) -> tuple[list[Tree], list[float]]:
        # A refined grammar has many derivations per tree (one per choice of sub-symbols):
        # more of them are needed for k distinct trees.
        cap = (3 * k + 20) * (REFINED_KBEST_FACTOR if "latent" in self.g.meta else 1)
        kb = LazyKBest(self, cap)
        root = (TOP, self.full, self.g.start)
        trees: list[Tree] = []
        scores: list[float] = []
        seen: set[str] = set()
        shapes: set[int] = set()
        for rank in range(cap):
            d = kb.get(root, rank)
            if d is None:
                break
            shape = kb.shape(root, rank)
            if shape in shapes:
                continue  # the tree of an earlier derivation (another choice of sub-symbols)
            shapes.add(shape)
            tree = unbinarize(kb.build(root, rank, words))
            key = tree_key(tree)
            if key in seen:
                continue
            seen.add(key)
            trees.append(tree)
            scores.append(d[0])
            if len(trees) == k:
                break
        return trees, scores


@dataclass
class _MaxRuleTables:
    """The fine grammar's rules and edges grouped by the coarse rule or edge they project to
    (see :func:`parser.kernels.max_rule`)."""

    to_coarse: np.ndarray
    n_coarse: int
    start: int
    g_off: np.ndarray
    g_rules: np.ndarray
    g_coarse: np.ndarray
    r_parent: np.ndarray
    r_w: np.ndarray
    c_parent: np.ndarray
    c_left: np.ndarray
    c_right: np.ndarray
    e_coarse: np.ndarray
    ce_parent: np.ndarray
    ce_child: np.ndarray
    ce_chain: np.ndarray


def max_rule_tables(g: Grammar) -> _MaxRuleTables:
    """Tables of the max-rule decoder for ``g`` (cached on the grammar): a refined grammar's
    rules project onto its base symbols (:func:`parser.latent.coarse_grammar`), a plain
    grammar's onto themselves."""
    cached = g.__dict__.get("_max_rule")
    if cached is not None:
        return cast(_MaxRuleTables, cached)
    tab = tables(g)
    if "latent" in g.meta:
        from parser.latent import coarse_grammar

        to_coarse = coarse_grammar(g)[1].astype(np.int64)
    else:
        to_coarse = np.arange(g.n_symbols, dtype=np.int64)
    keys = np.stack(
        [to_coarse[tab.lo_parent], to_coarse[tab.lo_left], to_coarse[tab.lo_right]], axis=1
    )
    crules, c_of_rule = np.unique(keys, axis=0, return_inverse=True)
    c_of_rule = c_of_rule.ravel()
    pair_of_rule = np.repeat(np.arange(len(tab.pair_left)), np.diff(tab.pair_off))
    order = np.lexsort((c_of_rule, pair_of_rule))
    pq, cq = pair_of_rule[order], c_of_rule[order]
    first = np.ones(len(order), dtype=bool)
    first[1:] = (pq[1:] != pq[:-1]) | (cq[1:] != cq[:-1])
    starts = np.flatnonzero(first)
    ekeys = np.stack([to_coarse[tab.up], to_coarse[tab.uc], tab.uchain], axis=1)
    cedges, e_coarse = np.unique(ekeys, axis=0, return_inverse=True)
    m = _MaxRuleTables(
        to_coarse=to_coarse,
        n_coarse=int(to_coarse.max()) + 1,
        start=int(to_coarse[g.start]),
        g_off=np.searchsorted(pq[starts], np.arange(len(tab.pair_left) + 1)).astype(np.int64),
        g_rules=np.append(starts, len(order)).astype(np.int64),
        g_coarse=np.ascontiguousarray(cq[starts]).astype(np.int64),
        r_parent=np.ascontiguousarray(tab.lo_parent[order]),
        r_w=np.ascontiguousarray(tab.lo_w[order]),
        c_parent=np.ascontiguousarray(crules[:, 0]),
        c_left=np.ascontiguousarray(crules[:, 1]),
        c_right=np.ascontiguousarray(crules[:, 2]),
        e_coarse=np.ascontiguousarray(e_coarse.ravel()).astype(np.int64),
        ce_parent=np.ascontiguousarray(cedges[:, 0]),
        ce_child=np.ascontiguousarray(cedges[:, 1]),
        ce_chain=np.ascontiguousarray(cedges[:, 2]),
    )
    g.__dict__["_max_rule"] = m
    return m


# ------------------------------------------------------------------------- fallback
def fallback_tree(g: Grammar, words: Sequence[str], p: _Problem) -> Tree:
    """A well-formed tree keeping the constraints: the required spans nested under the root,
    each word under its fixed tag or the tag the lexicon likes best for it."""
    tags: list[str] = []
    counts = g.meta.get("tag_counts", {})
    default_tag = max(counts, key=counts.get) if counts else (g.tags[0] if g.tags else "X")
    default_tag = base_label(default_tag)
    for i in range(len(words)):
        fixed = p.tags[i]
        if fixed is not None:
            tags.append(fixed)
            continue
        row = p.lex[i]
        best = int(np.argmax(row))
        tags.append(g.base[best] if row[best] > -np.inf else default_tag)
    default_label = _default_phrase(g)
    n = len(words)
    spans: list[tuple[str, int, int]] = []
    for a, b, lab in p.required:
        if lab is None and (b - a == 1 or (a, b) == (0, n)):
            continue  # the preterminal or the root already spans these words
        if lab == g.root_label and (a, b) == (0, n):
            continue
        spans.append((lab or default_label, a, b))
    return tree_from_spans(words, tags, spans, root=g.root_label)


def _default_phrase(g: Grammar) -> str:
    for lab in ("FRAG", "X", "NP"):
        if lab in g.labels:
            return lab
    others = [lab for lab in g.labels if lab != g.root_label]
    return others[0] if others else g.root_label
