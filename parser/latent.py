"""Latent-annotation refinement of a grammar by split-merge training over gold trees.

What it computes (the split-merge method of Petrov, Barrett, Thibaux and Klein 2006, "Learning
accurate, compact, and interpretable tree annotation", ACL; details from memory)
    Starting from a grammar of :mod:`parser.grammar` (annotated, markovized, unary chains
    collapsed into edges) and the trees it was trained on, every symbol X except the start
    symbol carries ``k[X]`` latent sub-symbols ``X~#0 .. X~#k-1``. A cycle:

    * **split**: every sub-symbol becomes two; a rule's probability is shared between the
      halves of each child, with a small seeded antisymmetric perturbation (``1 + e`` and
      ``1 - e``), so the split grammar is still normalized and gives every gold tree exactly
      the original probability; the perturbation breaks the symmetry for EM;
    * **EM** over the gold trees: inside-outside restricted to each known tree (the only
      latent variables are the sub-symbols of its nodes), so a pass costs O(nodes x k^3);
      the M-step is relative frequency of the expected counts, then (optionally) smoothing of
      each rule towards the mean over the parent's sub-symbols (linear smoothing of the paper,
      ``smoothing`` = its alpha) and the words' smoothing below;
    * **merge**: for each pair of sub-symbols born of one split, the approximate loss of
      training likelihood if the pair were one symbol again (the paper's estimate: at every
      node of the symbol, the pair's inside scores are mixed by the pair's relative frequency
      and their outside scores added, the other nodes left as they are); the fraction
      ``merge_fraction`` of pairs with the smallest loss is merged, rules of a merged parent
      averaged with the sub-symbols' expected counts as weights, rules into a merged child
      summed;
    * a few more EM iterations.

    The model keeps the top/bottom roles of :mod:`parser.grammar`: a node is a *top* (its
    parent's view; it expands by one unary edge) over a *bottom* (it branches, or emits a
    word). An identity edge (no unary chain) keeps the sub-symbol (its matrix is diagonal), a
    real unary chain may change it.

    Words: P(w | T_x) = lam_x P_base(w | T) r_x(w) / Z_x, where P_base is the base grammar's
    smoothed lexicon (known words and unknown-word classes), lam_x the lexical share of the
    bottom T_x, and r_x(w) = P(x | T, w) / P(x | T) the sub-symbol's preference for the word,
    P(x | T, w) = (c(T_x, w) + beta P(x | T)) / (c(T, w) + beta) (``word_smoothing`` = beta;
    r = 1 for a word never seen with T). ``word_smoothing=None`` uses the plain relative
    frequency of the expected counts instead (exact EM, but no unknown words).

    :meth:`LatentGrammar.to_grammar` writes the refined grammar as an ordinary
    :class:`parser.grammar.Grammar` over the sub-symbols: the chart parser then sums over the
    sub-symbols of each label, so its span posteriors are the refined grammar's posteriors
    projected onto ordinary labels, and the consensus tree decodes them.

    Parsing: the exported grammar is parsed coarse-to-fine by :func:`parser.chart.parse`
    (Petrov and Klein 2007): it keeps its cycle hierarchy (each sub-symbol's ancestor after
    every earlier cycle, ``meta["latent"]["levels"]``); :func:`level_grammar` projects it onto
    each level (the base symbols first, as :func:`coarse_grammar`), each level's posteriors
    under the same constraints prune the next level's chart and the last the refined chart
    (:data:`parser.chart.REFINED_PRUNE`), and the consensus tree decodes the refined
    posteriors projected onto ordinary labels. A grammar saved without the hierarchy is
    pruned through its base symbols alone. :func:`train_refined` starts from
    :data:`COARSE_BASE`, not from the annotated default: split from the annotated grammar the
    sub-symbols overfit (see the figures there).

Complexity: an EM pass is O(sum over nodes of k_parent k_left k_right); memory O(nodes x k)
plus the lexicon, O(tag sub-symbols x lexicon columns). Limits: the trees must be exactly
those the base grammar was trained on (same options), or at least use no rule it lacks; the
exported grammar has up to k^3 times the binary rules (``prune`` drops the tiny ones).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, cast

import numpy as np
from nltk import Tree
from numba import njit

from parser import binarize as bz
from parser.errors import GrammarError
from parser.grammar import Grammar

#: Defaults of the paper (from memory: 50% of the splits merged back, alpha 0.01 for the
#: rules, 1% randomness when splitting).
DEFAULT_MERGE_FRACTION = 0.5
DEFAULT_SMOOTHING = 0.01
DEFAULT_NOISE = 0.01
DEFAULT_WORD_SMOOTHING = 1.0
DEFAULT_EM_ITERATIONS = 20
DEFAULT_EM_AFTER_MERGE = 5
DEFAULT_EM_TOLERANCE = 0.0
#: Refined rules at most this probable are left out of a grammar exported for parsing
#: (common practice, no source: the chart's cost grows with the rules, and such rules
#: change no decision that matters).
DEFAULT_PRUNE = 1e-6
#: Separates a symbol's name from its sub-symbol number in exported grammars (the chart
#: strips it with the rest of the annotations, see :func:`parser.binarize.base_label`).
SUBSYMBOL = bz.FEATURE + "#"

TOP, BINARY, LEXICAL = 0, 1, 2

#: progress(cycle, em_iteration, training log-likelihood); iteration 0 is the likelihood
#: right after the split (or, for cycle 0, of the base grammar).
LatentProgress = Callable[[int, int, float], None]


# --------------------------------------------------------------------------- the treebank
@dataclass(frozen=True)
class Treebank:
    """Gold trees as node arrays in post-order (children first, each tree's root last).

    kind: int8[M] (TOP, BINARY, LEXICAL); sym: int32[M]; rule: int32[M] (edge index for TOP,
    binary rule index for BINARY, lexicon column for LEXICAL); left, right: int32[M]
    (children; TOP has its bottom in ``left``); parent: int32[M] (-1 for roots);
    tree_of: int32[M]; identity: bool[M] (TOP over an identity edge).
    """

    kind: np.ndarray
    sym: np.ndarray
    rule: np.ndarray
    left: np.ndarray
    right: np.ndarray
    parent: np.ndarray
    tree_of: np.ndarray
    identity: np.ndarray
    n_trees: int


def binarized_training_trees(trees: Iterable[Tree], g: Grammar) -> list[Tree]:
    """The binarized trees :func:`parser.grammar.train_grammar` counted for ``g`` (its
    options are read from ``g.meta``)."""
    from parser.annotate import annotators_for, functions_kept

    meta = g.meta
    if meta.get("source") != "trees":
        raise GrammarError("refinement needs a grammar trained from trees")
    features = meta.get("features", [])
    settings = (
        meta["horizontal"],
        meta["vertical"],
        meta["tag_ancestors"],
        annotators_for(features),
        meta["head_outward"],
        meta["plain_intermediates"],
    )
    cleaned = [bz.clean_tree(t, functions_kept(features)) for t in trees]
    rare = None
    if meta["min_context"] > 1:
        rare = bz.rare_labels((bz.binarize(c, *settings) for c in cleaned), meta["min_context"])
    return [bz.binarize(c, *settings, rare=rare) for c in cleaned]


def treebank(g: Grammar, binarized: Sequence[Tree]) -> Treebank:
    """Node arrays of ``binarized`` trees under ``g``'s symbols, rules and edges; GrammarError
    naming the tree and the rule when a tree uses one ``g`` lacks."""
    names = {s: i for i, s in enumerate(g.symbols)}
    chain_ids = {c: i for i, c in enumerate(g.chains)}
    edge_ids = {
        (int(a), int(b), int(c)): e
        for e, (a, b, c) in enumerate(zip(g.un_parent, g.un_child, g.un_chain, strict=True))
    }
    bin_ids = {
        (int(a), int(b), int(c)): r
        for r, (a, b, c) in enumerate(zip(g.bin_parent, g.bin_left, g.bin_right, strict=True))
    }
    kind: list[int] = []
    sym: list[int] = []
    rule: list[int] = []
    left: list[int] = []
    right: list[int] = []
    tree_of: list[int] = []
    identity: list[bool] = []

    def add(k: int, s: int, r: int, lft: int, rgt: int, t: int, ident: bool) -> int:
        kind.append(k)
        sym.append(s)
        rule.append(r)
        left.append(lft)
        right.append(rgt)
        tree_of.append(t)
        identity.append(ident)
        return len(kind) - 1

    for t, tree in enumerate(binarized):
        leaf = [0]

        def top(node: Tree, t: int = t, leaf: list[int] = leaf) -> int:
            chain = [node.label()]
            cur = node
            while len(cur) == 1 and not isinstance(cur[0], str):
                cur = cur[0]
                chain.append(cur.label())
            try:
                a, b = names[chain[0]], names[chain[-1]]
                e = edge_ids[(a, b, chain_ids[tuple(chain)])]
            except KeyError as exc:
                raise GrammarError(
                    f"tree {t}: the grammar has no unary edge {' -> '.join(chain)}"
                ) from exc
            if len(cur) == 1:
                col = g.word_column(cur[0], leaf[0] == 0)
                leaf[0] += 1
                if col < 0:
                    raise GrammarError(f"tree {t}: word {cur[0]!r} has no lexicon column")
                bottom = add(LEXICAL, b, col, -1, -1, t, False)
            elif len(cur) == 2:
                lft, rgt = top(cur[0]), top(cur[1])
                key = (b, sym[lft], sym[rgt])
                if key not in bin_ids:
                    raise GrammarError(
                        f"tree {t}: the grammar has no rule {chain[-1]} -> "
                        f"{g.symbols[key[1]]} {g.symbols[key[2]]}"
                    )
                bottom = add(BINARY, b, bin_ids[key], lft, rgt, t, False)
            else:
                raise GrammarError(f"tree {t}: node {cur.label()!r} has {len(cur)} children")
            return add(TOP, a, e, bottom, -1, t, len(chain) == 1)

        top(tree)
    m = len(kind)
    parent = np.full(m, -1, dtype=np.int32)
    lft_a = np.array(left, dtype=np.int32)
    rgt_a = np.array(right, dtype=np.int32)
    idx = np.arange(m, dtype=np.int32)
    parent[lft_a[lft_a >= 0]] = idx[lft_a >= 0]
    parent[rgt_a[rgt_a >= 0]] = idx[rgt_a >= 0]
    return Treebank(
        kind=np.array(kind, dtype=np.int8),
        sym=np.array(sym, dtype=np.int32),
        rule=np.array(rule, dtype=np.int32),
        left=lft_a,
        right=rgt_a,
        parent=parent,
        tree_of=np.array(tree_of, dtype=np.int32),
        identity=np.array(identity, dtype=bool),
        n_trees=len(binarized),
    )


# --------------------------------------------------------------------------- kernels
@njit(cache=True)
def _inside(  # type: ignore[no-untyped-def]
    kind,
    sym,
    rule,
    left,
    right,
    ks,
    boff,
    uoff,
    bw,
    uw,
    lex,
    lex_row,
    noff,
    ins,
    scale,
):
    for n in range(len(kind)):
        ka = ks[sym[n]]
        o = noff[n]
        sc = 0.0
        if kind[n] == 2:
            r0 = lex_row[sym[n]]
            for x in range(ka):
                ins[o + x] = lex[r0 + x, rule[n]]
        elif kind[n] == 1:
            lt, rt = left[n], right[n]
            kl, kr = ks[sym[lt]], ks[sym[rt]]
            ol, orr = noff[lt], noff[rt]
            base = boff[rule[n]]
            for x in range(ka):
                s = 0.0
                for y in range(kl):
                    iy = ins[ol + y]
                    if iy == 0.0:
                        continue
                    row = base + (x * kl + y) * kr
                    for z in range(kr):
                        s += bw[row + z] * iy * ins[orr + z]
                ins[o + x] = s
            sc = scale[lt] + scale[rt]
        else:
            c = left[n]
            kc = ks[sym[c]]
            oc = noff[c]
            base = uoff[rule[n]]
            for x in range(ka):
                s = 0.0
                for y in range(kc):
                    s += uw[base + x * kc + y] * ins[oc + y]
                ins[o + x] = s
            sc = scale[c]
        _normalize(ins, o, ka, scale, n, sc)


@njit(cache=True)
def _outside(  # type: ignore[no-untyped-def]
    kind,
    sym,
    rule,
    left,
    right,
    parent,
    tree_of,
    ks,
    boff,
    uoff,
    bw,
    uw,
    lex_row,
    noff,
    ins,
    scale,
    logz,
    out,
    oscale,
    post,
    bc,
    uc,
    lc,
):
    """Scaled outside scores, node posteriors and expected rule counts (added to bc, uc, lc)."""
    for n in range(len(kind) - 1, -1, -1):
        ka = ks[sym[n]]
        o = noff[n]
        lz = logz[tree_of[n]]
        if parent[n] < 0:
            for x in range(ka):
                out[o + x] = 1.0
            oscale[n] = 0.0
        if not np.isfinite(lz):
            continue
        f = math.exp(oscale[n] + scale[n] - lz)
        for x in range(ka):
            post[o + x] = out[o + x] * ins[o + x] * f
        if kind[n] == 2:
            r0 = lex_row[sym[n]]
            for x in range(ka):
                lc[r0 + x, rule[n]] += post[o + x]
        elif kind[n] == 1:
            lt, rt = left[n], right[n]
            kl, kr = ks[sym[lt]], ks[sym[rt]]
            ol, orr = noff[lt], noff[rt]
            base = boff[rule[n]]
            g = math.exp(oscale[n] + scale[lt] + scale[rt] - lz)
            for y in range(kl):
                out[ol + y] = 0.0
            for z in range(kr):
                out[orr + z] = 0.0
            for x in range(ka):
                ox = out[o + x]
                if ox == 0.0:
                    continue
                for y in range(kl):
                    row = base + (x * kl + y) * kr
                    iy = ins[ol + y]
                    for z in range(kr):
                        w = bw[row + z] * ox
                        out[ol + y] += w * ins[orr + z]
                        out[orr + z] += w * iy
                        bc[row + z] += w * iy * ins[orr + z] * g
            _normalize(out, ol, kl, oscale, lt, oscale[n] + scale[rt])
            _normalize(out, orr, kr, oscale, rt, oscale[n] + scale[lt])
        else:
            c = left[n]
            kc = ks[sym[c]]
            oc = noff[c]
            base = uoff[rule[n]]
            g = math.exp(oscale[n] + scale[c] - lz)
            for y in range(kc):
                out[oc + y] = 0.0
            for x in range(ka):
                ox = out[o + x]
                for y in range(kc):
                    w = uw[base + x * kc + y] * ox
                    out[oc + y] += w
                    uc[base + x * kc + y] += w * ins[oc + y] * g
            _normalize(out, oc, kc, oscale, c, oscale[n])


@njit(cache=True, inline="always")
def _normalize(out, o, k, oscale, n, sc):  # type: ignore[no-untyped-def]
    """Scale out[o:o + k] to a maximum of 1; its log scale, ``sc`` plus the log of that
    maximum, goes to oscale[n]."""
    m = 0.0
    for x in range(k):
        if out[o + x] > m:
            m = out[o + x]
    if m > 0.0:
        for x in range(k):
            out[o + x] /= m
        oscale[n] = sc + math.log(m)
    else:
        oscale[n] = -np.inf


@njit(cache=True)
def _merge_loss(  # type: ignore[no-untyped-def]
    kind,
    sym,
    identity,
    parent,
    ks,
    soff,
    noff,
    ins,
    out,
    w_top,
    w_bot,
    poff,
    loss,
):
    """Add, per pair (2j, 2j+1) of sub-symbols, the approximate log-likelihood lost by merging
    it, over every node where the symbol's sub-symbol is a latent variable of its own."""
    for n in range(len(kind)):
        if kind[n] != 0 and parent[n] >= 0 and identity[parent[n]]:
            continue
        a = sym[n]
        ka = ks[a]
        if ka < 2:
            continue
        o = noff[n]
        w = w_top if kind[n] == 0 else w_bot
        tot = 0.0
        for x in range(ka):
            tot += ins[o + x] * out[o + x]
        if tot <= 0.0:
            continue
        for j in range(ka // 2):
            x1 = 2 * j
            x2 = x1 + 1
            w1 = w[soff[a] + x1] + 1e-30
            w2 = w[soff[a] + x2] + 1e-30
            p1 = w1 / (w1 + w2)
            i1, i2 = ins[o + x1], ins[o + x2]
            o1, o2 = out[o + x1], out[o + x2]
            merged = tot - i1 * o1 - i2 * o2 + (p1 * i1 + (1.0 - p1) * i2) * (o1 + o2)
            if merged > 0.0:
                loss[poff[a] + j] += math.log(tot) - math.log(merged)


@njit(cache=True)
def _split_block(par, lef, rig, ident, old, old_off, ks, fs, new_off, noise, noff_new):  # type: ignore[no-untyped-def]
    """Split every rule block; ``fs[sym]`` is 2 for a symbol being split, else 1."""
    new = np.zeros(new_off[-1])
    for r in range(len(par)):
        p, lt = par[r], lef[r]
        kp, kl = ks[p], ks[lt]
        fp, fl = fs[p], fs[lt]
        kr, fr = 1, 1
        if rig[r] >= 0:
            kr, fr = ks[rig[r]], fs[rig[r]]
        kp2, kl2, kr2 = kp * fp, kl * fl, kr * fr
        for x2 in range(kp2):
            x = x2 // fp
            el = noise[noff_new[r] + x2, 0]
            er = noise[noff_new[r] + x2, 1]
            for y2 in range(kl2):
                y = y2 // fl
                if ident[r] and y2 != x2:
                    continue
                sl = 1.0
                if fl == 2 and not ident[r]:
                    sl = (1.0 + el if y2 % 2 == 0 else 1.0 - el) / 2.0
                for z2 in range(kr2):
                    z = z2 // fr
                    sr = 1.0
                    if fr == 2:
                        sr = (1.0 + er if z2 % 2 == 0 else 1.0 - er) / 2.0
                    new[new_off[r] + (x2 * kl2 + y2) * kr2 + z2] = (
                        old[old_off[r] + (x * kl + y) * kr + z] * sl * sr
                    )
    return new


@njit(cache=True)
def _merge_block(  # type: ignore[no-untyped-def]
    par,
    lef,
    rig,
    old,
    old_off,
    ks_old,
    ks_new,
    new_off,
    soff_old,
    soff_new,
    submap,
    wpar,
):
    """Merge sub-symbols: ``submap[soff_old[s] + x]`` is x's new index; rows of a merged
    parent are averaged with weights ``wpar`` (by old sub-symbol id), children summed."""
    new = np.zeros(new_off[-1])
    wsum = np.zeros(soff_new[-1])
    for s in range(len(ks_old)):
        for x in range(ks_old[s]):
            wsum[soff_new[s] + submap[soff_old[s] + x]] += wpar[soff_old[s] + x]
    for r in range(len(par)):
        p, lt = par[r], lef[r]
        kp, kl = ks_old[p], ks_old[lt]
        kl2 = ks_new[lt]
        kr, kr2, rr = 1, 1, rig[r]
        if rr >= 0:
            kr, kr2 = ks_old[rr], ks_new[rr]
        for x in range(kp):
            x2 = submap[soff_old[p] + x]
            wx = wpar[soff_old[p] + x] / wsum[soff_new[p] + x2]
            for y in range(kl):
                y2 = submap[soff_old[lt] + y]
                for z in range(kr):
                    z2 = submap[soff_old[rr] + z] if rr >= 0 else 0
                    new[new_off[r] + (x2 * kl2 + y2) * kr2 + z2] += (
                        wx * old[old_off[r] + (x * kl + y) * kr + z]
                    )
    return new


# --------------------------------------------------------------------------- the model
def _offsets(sizes: np.ndarray) -> np.ndarray:
    out = np.zeros(len(sizes) + 1, dtype=np.int64)
    np.cumsum(sizes, out=out[1:])
    return out


class LatentGrammar:
    """A grammar whose symbols carry latent sub-symbols (see the module docstring).

    ks: int64[N] sub-symbols per symbol; soff: int64[N+1] global sub-symbol ids;
    bw: float64[sum_r k_p k_l k_r] binary rule probabilities, block r at boff[r], laid out
    [x, y, z]; uw: float64[sum_e k_a k_b] unary edge probabilities, block e at uoff[e], [x, y];
    lex: float64[sum_T k_T, columns] P(word column, lexical | bottom T_x), rows of T from
    lex_row[T] (-1 for symbols that emit no word).
    """

    def __init__(
        self,
        base: Grammar,
        ks: np.ndarray,
        bw: np.ndarray,
        uw: np.ndarray,
        lex: np.ndarray,
        ancestry: Sequence[np.ndarray] = (),
        level_ks: Sequence[np.ndarray] = (),
    ) -> None:
        self.base = base
        self.ks = np.asarray(ks, dtype=np.int64)
        #: The cycle hierarchy: ``ancestry[L][x]`` is the global id of sub-symbol x's ancestor
        #: in the grammar of level L (level 0: the base symbols; level L: after L split-merge
        #: cycles), and ``level_ks[L]`` that level's sub-symbols per symbol; one entry per
        #: level coarser than this grammar.
        self.ancestry = [np.asarray(a, dtype=np.int64) for a in ancestry]
        self.level_ks = [np.asarray(k, dtype=np.int64) for k in level_ks]
        self.soff = _offsets(self.ks)
        self.boff = _offsets(
            self.ks[base.bin_parent] * self.ks[base.bin_left] * self.ks[base.bin_right]
        )
        self.uoff = _offsets(self.ks[base.un_parent] * self.ks[base.un_child])
        n = base.n_symbols
        self.lex_row = np.full(n, -1, dtype=np.int64)
        lex_k = self.ks[base.lex_symbols]
        self.lex_row[base.lex_symbols] = _offsets(lex_k)[:-1]
        self.bw, self.uw, self.lex = bw, uw, lex
        if len(bw) != self.boff[-1] or len(uw) != self.uoff[-1] or lex.shape[0] != lex_k.sum():
            raise GrammarError("latent grammar arrays do not match the sub-symbol counts")
        self.identity_edge = np.array([len(base.chains[c]) == 1 for c in base.un_chain], dtype=bool)

    @classmethod
    def from_grammar(cls, g: Grammar) -> LatentGrammar:
        """Every symbol with one sub-symbol: the same probabilities as ``g``."""
        with np.errstate(under="ignore"):
            return cls(
                g,
                np.ones(g.n_symbols, dtype=np.int64),
                np.exp(g.bin_logp),
                np.exp(g.un_logp),
                np.exp(g.lex_logp),
            )

    @property
    def n_subsymbols(self) -> int:
        return int(self.soff[-1])

    def _rule_arrays(self) -> tuple[tuple[np.ndarray, ...], tuple[np.ndarray, ...]]:
        g = self.base
        binary = (
            g.bin_parent.astype(np.int64),
            g.bin_left.astype(np.int64),
            g.bin_right.astype(np.int64),
            np.zeros(len(g.bin_parent), dtype=np.bool_),
        )
        unary = (
            g.un_parent.astype(np.int64),
            g.un_child.astype(np.int64),
            np.full(len(g.un_parent), -1, dtype=np.int64),
            self.identity_edge,
        )
        return binary, unary

    # ----------------------------------------------------------------- split
    def split(self, rng: np.random.Generator, noise: float = DEFAULT_NOISE) -> LatentGrammar:
        """Every sub-symbol of every symbol but the start in two (see the module docstring)."""
        g = self.base
        fs = np.full(g.n_symbols, 2, dtype=np.int64)
        fs[g.start] = 1
        ks_new = self.ks * fs
        binary, unary = self._rule_arrays()
        blocks = []
        for (par, lef, rig, ident), old, old_off in (
            (binary, self.bw, self.boff),
            (unary, self.uw, self.uoff),
        ):
            kr_new = np.where(rig >= 0, ks_new[np.maximum(rig, 0)], 1)
            new_off = _offsets(ks_new[par] * ks_new[lef] * kr_new)
            noff_new = _offsets(ks_new[par])
            eps = rng.uniform(-noise, noise, size=(int(noff_new[-1]), 2))
            blocks.append(
                _split_block(
                    par, lef, rig, ident, old, old_off, self.ks, fs, new_off, eps, noff_new
                )
            )
        lex = np.repeat(self.lex, fs[g.lex_symbols].repeat(self.ks[g.lex_symbols]), axis=0)
        sym_new = np.repeat(np.arange(g.n_symbols), ks_new)
        local = np.arange(int(ks_new.sum())) - _offsets(ks_new)[sym_new]
        parent = self.soff[sym_new] + local // fs[sym_new]
        return LatentGrammar(
            g,
            ks_new,
            blocks[0],
            blocks[1],
            lex,
            [a[parent] for a in self.ancestry] + [parent],
            [*self.level_ks, self.ks],
        )

    # ----------------------------------------------------------------- merge
    def merge(
        self, merged: Mapping[int, Sequence[int]], w_top: np.ndarray, w_bot: np.ndarray
    ) -> LatentGrammar:
        """Merge, for each symbol s in ``merged``, its sub-symbol pairs (2j, 2j+1) for j in
        ``merged[s]``. ``w_top``/``w_bot``: expected counts per sub-symbol (global ids) in the
        top and bottom roles, the weights of the average over a merged parent."""
        g = self.base
        submap = np.zeros(self.n_subsymbols, dtype=np.int64)
        ks_new = self.ks.copy()
        for s in range(g.n_symbols):
            pairs = set(merged.get(s, ()))
            nxt = 0
            for x in range(int(self.ks[s])):
                if x % 2 == 1 and x // 2 in pairs:
                    submap[self.soff[s] + x] = nxt - 1
                    continue
                submap[self.soff[s] + x] = nxt
                nxt += 1
            ks_new[s] = nxt
        soff_new = _offsets(ks_new)
        binary, unary = self._rule_arrays()
        blocks = []
        for (par, lef, rig, _), old, old_off, w in (
            (binary, self.bw, self.boff, w_bot),
            (unary, self.uw, self.uoff, w_top),
        ):
            kr_new = np.where(rig >= 0, ks_new[np.maximum(rig, 0)], 1)
            new_off = _offsets(ks_new[par] * ks_new[lef] * kr_new)
            blocks.append(
                _merge_block(
                    par,
                    lef,
                    rig,
                    old,
                    old_off,
                    self.ks,
                    ks_new,
                    new_off,
                    self.soff,
                    soff_new,
                    submap,
                    w + 1e-30,
                )
            )
        # Lexicon: rows of a merged tag averaged with the bottom weights.
        rows_old = np.concatenate([self.soff[t] + np.arange(self.ks[t]) for t in g.lex_symbols])
        new_k = ks_new[g.lex_symbols]
        target = np.concatenate(
            [
                o + submap[self.soff[t] : self.soff[t] + self.ks[t]]
                for t, o in zip(g.lex_symbols, _offsets(new_k)[:-1], strict=True)
            ]
        )
        wr = w_bot[rows_old] + 1e-30
        lex = np.zeros((int(new_k.sum()), self.lex.shape[1]))
        np.add.at(lex, target, self.lex * wr[:, None])
        lex /= np.bincount(target, wr, minlength=len(lex))[:, None]
        # A merged pair shares its ancestors (both halves of one split), so any member does.
        member = np.zeros(int(soff_new[-1]), dtype=np.int64)
        old_sym = np.repeat(np.arange(g.n_symbols), self.ks)
        member[soff_new[old_sym] + submap] = np.arange(self.n_subsymbols)
        return LatentGrammar(
            g,
            ks_new,
            blocks[0],
            blocks[1],
            lex,
            [a[member] for a in self.ancestry],
            self.level_ks,
        )

    # ----------------------------------------------------------------- export
    def subsymbol_names(self) -> list[str]:
        out = []
        for s, name in enumerate(self.base.symbols):
            if self.ks[s] == 1:
                out.append(name)
            else:
                out.extend(f"{name}{SUBSYMBOL}{x}" for x in range(int(self.ks[s])))
        return out

    def to_grammar(self, prune: float = 0.0) -> Grammar:
        """The refined grammar as an ordinary grammar over the sub-symbols; rules of
        probability at most ``prune`` are left out (0: only impossible ones)."""
        g = self.base
        binary, unary = self._rule_arrays()
        arrays = []
        for (par, lef, rig, _), w, off in (
            (binary, self.bw, self.boff),
            (unary, self.uw, self.uoff),
        ):
            kl = self.ks[lef]
            kr = np.where(rig >= 0, self.ks[np.maximum(rig, 0)], 1)
            rule = np.repeat(np.arange(len(par)), off[1:] - off[:-1])
            pos = np.arange(len(w)) - off[rule]
            z = pos % kr[rule]
            y = (pos // kr[rule]) % kl[rule]
            x = pos // (kr[rule] * kl[rule])
            keep = w > prune
            rule, x, y, z = rule[keep], x[keep], y[keep], z[keep]
            arrays.append(
                (
                    self.soff[par[rule]] + x,
                    self.soff[lef[rule]] + y,
                    np.where(rig[rule] >= 0, self.soff[np.maximum(rig[rule], 0)] + z, -1),
                    np.log(w[keep]),
                    rule,
                )
            )
        (bp, bl, br, blp, _), (up, uc, _, ulp, ue) = arrays
        lex_syms = np.concatenate([self.soff[t] + np.arange(self.ks[t]) for t in g.lex_symbols])
        with np.errstate(divide="ignore"):
            lex_logp = np.log(self.lex)
        meta = dict(g.meta)
        meta["latent"] = {
            "subsymbols": self.n_subsymbols,
            "base_symbols": g.n_symbols,
            # The cycle hierarchy (see __init__), for coarse-to-fine parsing level by level.
            "levels": [
                {"ks": [int(x) for x in k], "ancestor": [int(x) for x in a]}
                for k, a in zip(self.level_ks, self.ancestry, strict=True)
            ],
        }
        start = int(self.soff[g.start])
        return Grammar(
            symbols=self.subsymbol_names(),
            start=start,
            bin_parent=bp,
            bin_left=bl,
            bin_right=br,
            bin_logp=blp,
            un_parent=up,
            un_child=uc,
            un_chain=g.un_chain[ue],
            un_logp=ulp,
            chains=g.chains,
            lex_symbols=lex_syms,
            lex_logp=lex_logp,
            vocab=g.vocab,
            signatures=g.signatures,
            meta=meta,
        )


# --------------------------------------------------------------------------- EM
@dataclass
class Expectations:
    """One E-step: training log-likelihood, expected counts (shaped as the parameters), node
    inside/outside scores and the expected count of each sub-symbol per role."""

    loglik: float
    bc: np.ndarray
    uc: np.ndarray
    lc: np.ndarray
    ins: np.ndarray
    out: np.ndarray
    w_top: np.ndarray
    w_bot: np.ndarray
    noff: np.ndarray


def _inside_pass(
    lg: LatentGrammar, tb: Treebank
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(node offsets, scaled inside scores, their log scales, log P(tree) per tree)."""
    noff = _offsets(lg.ks[tb.sym])
    ins = np.zeros(int(noff[-1]))
    scale = np.zeros(len(tb.kind))
    _inside(
        tb.kind,
        tb.sym,
        tb.rule,
        tb.left,
        tb.right,
        lg.ks,
        lg.boff,
        lg.uoff,
        lg.bw,
        lg.uw,
        lg.lex,
        lg.lex_row,
        noff,
        ins,
        scale,
    )
    roots = np.flatnonzero(tb.parent < 0)
    logz = np.full(tb.n_trees, -np.inf)
    with np.errstate(divide="ignore"):
        logz[tb.tree_of[roots]] = scale[roots] + np.log(ins[noff[roots]])
    return noff, ins, scale, logz


def tree_logprobs(lg: LatentGrammar, tb: Treebank) -> np.ndarray:
    """log P(tree) per tree of ``tb``, summed over the sub-symbols of its nodes."""
    return _inside_pass(lg, tb)[3]


def expectations(lg: LatentGrammar, tb: Treebank) -> Expectations:
    """Inside-outside over the known trees (see the module docstring); GrammarError when a
    tree has probability zero."""
    noff, ins, scale, logz = _inside_pass(lg, tb)
    m = len(tb.kind)
    args = (tb.kind, tb.sym, tb.rule, tb.left, tb.right)
    if not np.all(np.isfinite(logz)):
        bad = int(np.flatnonzero(~np.isfinite(logz))[0])
        raise GrammarError(f"tree {bad} has probability zero under the latent grammar")
    out = np.zeros_like(ins)
    oscale = np.zeros(m)
    post = np.zeros_like(ins)
    bc = np.zeros_like(lg.bw)
    uc = np.zeros_like(lg.uw)
    lc = np.zeros_like(lg.lex)
    _outside(
        *args,
        tb.parent,
        tb.tree_of,
        lg.ks,
        lg.boff,
        lg.uoff,
        lg.bw,
        lg.uw,
        lg.lex_row,
        noff,
        ins,
        scale,
        logz,
        out,
        oscale,
        post,
        bc,
        uc,
        lc,
    )
    node_sub = np.repeat(lg.soff[tb.sym], lg.ks[tb.sym]) + (
        np.arange(len(ins)) - np.repeat(noff[:-1], lg.ks[tb.sym])
    )
    is_top = np.repeat(tb.kind == TOP, lg.ks[tb.sym])
    n_sub = lg.n_subsymbols
    w_top = np.bincount(node_sub[is_top], post[is_top], minlength=n_sub)
    w_bot = np.bincount(node_sub[~is_top], post[~is_top], minlength=n_sub)
    return Expectations(
        loglik=float(logz.sum()),
        bc=bc,
        uc=uc,
        lc=lc,
        ins=ins,
        out=out,
        w_top=w_top,
        w_bot=w_bot,
        noff=noff,
    )


def maximize(
    lg: LatentGrammar,
    ex: Expectations,
    smoothing: float = DEFAULT_SMOOTHING,
    word_smoothing: float | None = DEFAULT_WORD_SMOOTHING,
    lexical_smoothing: float | None = None,
) -> LatentGrammar:
    """The M-step: relative frequencies of the expected counts per left-hand side (a top or
    a bottom sub-symbol), then smoothing (module docstring). A sub-symbol with no expected
    count keeps its old rules. ``lexical_smoothing`` smooths the tags' word rows (None: as
    much as the rules)."""
    g = lg.base
    binary, unary = lg._rule_arrays()
    (bpar, blef, brig, _), (upar, ulef, _, uident) = binary, unary
    b_rule = np.repeat(np.arange(len(bpar)), np.diff(lg.boff))
    b_pos = np.arange(len(lg.bw)) - lg.boff[b_rule]
    b_inner = lg.ks[blef[b_rule]] * lg.ks[brig[b_rule]]
    b_owner = lg.soff[bpar[b_rule]] + b_pos // b_inner
    u_rule = np.repeat(np.arange(len(upar)), np.diff(lg.uoff))
    u_pos = np.arange(len(lg.uw)) - lg.uoff[u_rule]
    u_inner = lg.ks[ulef[u_rule]]
    u_owner = lg.soff[upar[u_rule]] + u_pos // u_inner
    n_sub = lg.n_subsymbols
    lex_owner = np.concatenate([lg.soff[t] + np.arange(lg.ks[t]) for t in g.lex_symbols])
    lex_total = ex.lc.sum(axis=1)
    bottom = np.bincount(b_owner, ex.bc, minlength=n_sub)
    np.add.at(bottom, lex_owner, lex_total)
    top = np.bincount(u_owner, ex.uc, minlength=n_sub)
    with np.errstate(divide="ignore", invalid="ignore"):
        bw = np.where(bottom[b_owner] > 0, ex.bc / bottom[b_owner], lg.bw)
        uw = np.where(top[u_owner] > 0, ex.uc / top[u_owner], lg.uw)
    if smoothing > 0:
        bw = _smooth(bw, lg.boff[b_rule] + b_pos % b_inner, lg.ks[bpar[b_rule]], smoothing)
        su = _smooth(uw, lg.uoff[u_rule] + u_pos % u_inner, lg.ks[upar[u_rule]], smoothing)
        uw = np.where(uident[u_rule], uw, su)
    lex = _maximize_lexicon(lg, ex.lc, bottom[lex_owner], word_smoothing)
    lex_alpha = smoothing if lexical_smoothing is None else lexical_smoothing
    if lex_alpha > 0:
        tag_of_row = np.repeat(np.arange(len(g.lex_symbols)), lg.ks[g.lex_symbols])
        mean = np.zeros((len(g.lex_symbols), lex.shape[1]))
        np.add.at(mean, tag_of_row, lex)
        mean /= lg.ks[g.lex_symbols][:, None]
        lex = (1 - lex_alpha) * lex + lex_alpha * mean[tag_of_row]
    return LatentGrammar(g, lg.ks, bw, uw, lex, lg.ancestry, lg.level_ks)


def _smooth(w: np.ndarray, group: np.ndarray, k_parent: np.ndarray, alpha: float) -> np.ndarray:
    """(1 - alpha) p(A_x -> r) + alpha * mean over x of p(A_x -> r), per rule r."""
    mean = np.bincount(group, w, minlength=int(group.max(initial=0)) + 1) if len(w) else w
    out: np.ndarray = (1 - alpha) * w + alpha * mean[group] / k_parent
    return out


def _maximize_lexicon(
    lg: LatentGrammar, lc: np.ndarray, bottom: np.ndarray, word_smoothing: float | None
) -> np.ndarray:
    g = lg.base
    lex_total = lc.sum(axis=1)
    seen = bottom > 0
    if word_smoothing is None:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(seen[:, None], lc / bottom[:, None], lg.lex)
    beta = word_smoothing
    tag_of_row = np.repeat(np.arange(len(g.lex_symbols)), lg.ks[g.lex_symbols])
    with np.errstate(under="ignore"):
        base = np.exp(g.lex_logp)
    base /= np.maximum(base.sum(axis=1, keepdims=True), 1e-300)
    per_tag = np.zeros((len(g.lex_symbols), lc.shape[1]))
    np.add.at(per_tag, tag_of_row, lc)
    tag_total = per_tag.sum(axis=1)
    share = lex_total / np.maximum(tag_total[tag_of_row], 1e-300)  # P(x | T)
    with np.errstate(divide="ignore", invalid="ignore"):
        p_x_given_w = (lc + beta * share[:, None]) / (per_tag[tag_of_row] + beta)
        ratio = np.where(share[:, None] > 0, p_x_given_w / share[:, None], 1.0)
    dist = base[tag_of_row] * ratio
    dist /= np.maximum(dist.sum(axis=1, keepdims=True), 1e-300)
    lam = np.where(seen, lex_total / np.maximum(bottom, 1e-300), 0.0)
    fresh = lam[:, None] * dist
    return np.where(seen[:, None], fresh, lg.lex)


# --------------------------------------------------------------------------- cycles
def merge_losses(
    lg: LatentGrammar, tb: Treebank, ex: Expectations
) -> tuple[np.ndarray, np.ndarray]:
    """Approximate likelihood loss of merging each pair (2j, 2j+1): ``(loss, pair_symbol)``,
    indexed by pair (pairs of symbol s start at ``offsets[s]``; one pair per two
    sub-symbols)."""
    pairs = lg.ks // 2
    poff = _offsets(pairs)
    loss = np.zeros(int(poff[-1]))
    _merge_loss(
        tb.kind,
        tb.sym,
        tb.identity,
        tb.parent,
        lg.ks,
        lg.soff,
        ex.noff,
        ex.ins,
        ex.out,
        ex.w_top,
        ex.w_bot,
        poff,
        loss,
    )
    return loss, np.repeat(np.arange(len(pairs)), pairs)


def merge_least_useful(
    lg: LatentGrammar, tb: Treebank, ex: Expectations, fraction: float = DEFAULT_MERGE_FRACTION
) -> LatentGrammar:
    """Merge back the ``fraction`` of the latest splits whose loss is smallest."""
    loss, owner = merge_losses(lg, tb, ex)
    n_merge = int(round(fraction * len(loss)))
    if n_merge == 0:
        return lg
    chosen = np.argsort(loss, kind="stable")[:n_merge]
    poff = _offsets(lg.ks // 2)
    merged: dict[int, list[int]] = {}
    for p in chosen:
        s = int(owner[p])
        merged.setdefault(s, []).append(int(p - poff[s]))
    return lg.merge(merged, ex.w_top, ex.w_bot)


#: The base grammar refinement starts from (the published recipe starts from an X-bar grammar
#: with h=0, v=1 markovization; from memory): no parent, sibling or feature annotation, so the
#: splits are learnt rather than given. Measured (bench/accuracy_options.py, GUM split, first
#: 120 test sentences, words only, consensus labelled F1): the annotated default 81.04; refined
#: from the annotated default, 1 cycle 80.05, 2 cycles 79.51; from this base, 4 cycles 81.74.
COARSE_BASE: dict[str, Any] = {
    "horizontal": 0,
    "vertical": 1,
    "tag_ancestors": 0,
    "features": (),
    "min_context": 0,
}


@dataclass(frozen=True)
class RefineOptions:
    """Options of :func:`refine` (defaults in the constants of this module)."""

    cycles: int = 1
    em_iterations: int = DEFAULT_EM_ITERATIONS
    em_after_merge: int = DEFAULT_EM_AFTER_MERGE
    merge_fraction: float = DEFAULT_MERGE_FRACTION
    smoothing: float = DEFAULT_SMOOTHING
    word_smoothing: float | None = DEFAULT_WORD_SMOOTHING
    lexical_smoothing: float | None = None
    noise: float = DEFAULT_NOISE
    seed: int = 0
    #: Stop a run of EM early once an iteration raises the training log-likelihood by at most
    #: this fraction of its magnitude after an earlier one of the run raised it by at least ten
    #: times as much (``em_iterations`` and ``em_after_merge`` are then the most); 0: always
    #: the full count. The gains start tiny after a split (the halves begin nearly alike and
    #: take some iterations to part), rise, then fall: the condition waits for the fall.
    em_tolerance: float = DEFAULT_EM_TOLERANCE

    def __post_init__(self) -> None:
        if self.cycles < 0 or self.em_iterations < 0 or self.em_after_merge < 0:
            raise GrammarError("cycles and EM iterations must be >= 0")
        if not 0 <= self.merge_fraction <= 1:
            raise GrammarError(f"merge fraction must be in [0, 1], got {self.merge_fraction}")
        if not 0 <= self.smoothing < 1:
            raise GrammarError(f"smoothing must be in [0, 1), got {self.smoothing}")
        if self.lexical_smoothing is not None and not 0 <= self.lexical_smoothing < 1:
            raise GrammarError(f"lexical smoothing must be in [0, 1), got {self.lexical_smoothing}")
        if not 0 <= self.em_tolerance < 1:
            raise GrammarError(f"EM tolerance must be in [0, 1), got {self.em_tolerance}")
        if self.word_smoothing is not None and self.word_smoothing <= 0:
            raise GrammarError(f"word smoothing must be positive, got {self.word_smoothing}")


def em(
    lg: LatentGrammar,
    tb: Treebank,
    iterations: int,
    options: RefineOptions,
    report: Callable[[int, float], None] | None = None,
) -> tuple[LatentGrammar, list[float]]:
    """At most ``iterations`` EM steps (fewer with ``options.em_tolerance``, see
    :class:`RefineOptions`); returns the grammar and the training log-likelihood before each
    step and after the last."""
    logliks = []
    tol = options.em_tolerance
    peak = 0.0
    for it in range(iterations + 1):
        ex = expectations(lg, tb)
        logliks.append(ex.loglik)
        if report is not None:
            report(it, ex.loglik)
        if it == iterations:
            break
        if tol > 0 and it > 0:
            gain = (logliks[-1] - logliks[-2]) / abs(logliks[-2])
            peak = max(peak, gain)
            if gain <= tol and peak >= 10 * tol:
                break
        lg = maximize(lg, ex, options.smoothing, options.word_smoothing, options.lexical_smoothing)
    return lg, logliks


def refine(
    g: Grammar,
    trees: Iterable[Tree],
    options: RefineOptions | None = None,
    progress: LatentProgress | None = None,
    after_cycle: Callable[[int, LatentGrammar], None] | None = None,
) -> LatentGrammar:
    """Split-merge cycles from ``g`` over the trees it was trained on; ``after_cycle(cycle,
    grammar)`` sees the grammar at the end of each cycle (to score every number of cycles in
    one run)."""
    opts = options or RefineOptions()
    tb = treebank(g, binarized_training_trees(trees, g))
    rng = np.random.default_rng(opts.seed)
    lg = LatentGrammar.from_grammar(g)
    for cycle in range(1, opts.cycles + 1):

        def report(it: int, ll: float, cycle: int = cycle) -> None:
            if progress is not None:
                progress(cycle, it, ll)

        lg = lg.split(rng, opts.noise)
        lg, _ = em(lg, tb, opts.em_iterations, opts, report)
        lg = merge_least_useful(lg, tb, expectations(lg, tb), opts.merge_fraction)

        def report_after(it: int, ll: float, cycle: int = cycle) -> None:
            report(opts.em_iterations + 1 + it, ll, cycle)

        lg, _ = em(lg, tb, opts.em_after_merge, opts, report_after)
        if after_cycle is not None:
            after_cycle(cycle, lg)
    return lg


# --------------------------------------------------------------------------- projection
_SUFFIX = re.compile(re.escape(SUBSYMBOL) + r"\d+$")


def is_refined(g: Grammar) -> bool:
    """True for a grammar written by :meth:`LatentGrammar.to_grammar`."""
    return "latent" in g.meta


def expected_counts(g: Grammar, tol: float = 1e-10, max_iter: int = 5000) -> tuple[np.ndarray, ...]:
    """Expected number of top and bottom nodes of each symbol in a tree drawn from ``g``
    (the fixed point c_top = [start] + sum over binary rules of the parent bottom's count
    times the rule's probability, per child; c_bot = sum over unary edges), by iteration from
    zero; exact to ``tol`` relative for a consistent grammar."""
    n = g.n_symbols
    wb = np.exp(g.bin_logp)
    wu = np.exp(g.un_logp)

    def bottoms(c_top: np.ndarray) -> np.ndarray:
        out: np.ndarray = np.bincount(g.un_child, c_top[g.un_parent] * wu, minlength=n)
        return out

    c_top: np.ndarray = np.zeros(n)
    for _ in range(max_iter):
        flow = bottoms(c_top)[g.bin_parent] * wb
        new = np.bincount(g.bin_left, flow, minlength=n) + np.bincount(
            g.bin_right, flow, minlength=n
        )
        new[g.start] += 1.0
        done = np.max(np.abs(new - c_top)) <= tol * max(1.0, float(new.max()))
        c_top = new
        if done:
            break
    return c_top, bottoms(c_top)


def coarse_grammar(g: Grammar) -> tuple[Grammar, np.ndarray]:
    """The projection of a refined grammar onto its base symbols (Petrov and Klein 2007,
    "Improved inference for unlexicalized parsing", NAACL: each rule of the base symbols gets
    the refined rules' probabilities averaged over the parent's sub-symbols, weighted by their
    expected counts under the refined grammar itself), and the base symbol of each refined
    symbol. Cached on ``g``. The coarse-to-fine parse prunes the refined chart with this
    grammar's posteriors."""
    cached = g.__dict__.get("_coarse")
    if cached is not None:
        return cast(tuple[Grammar, np.ndarray], cached)
    names: dict[str, int] = {}
    to_coarse = np.array(
        [names.setdefault(_SUFFIX.sub("", s), len(names)) for s in g.symbols], dtype=np.int64
    )
    out = _project(g, to_coarse, sorted(names, key=names.__getitem__))
    g.__dict__["_coarse"] = out
    return out


def n_levels(g: Grammar) -> int:
    """How many levels of the cycle hierarchy a refined grammar keeps (0 for a grammar saved
    without it, or one refined by a single cycle beyond its base symbols: level 0)."""
    return len(g.meta.get("latent", {}).get("levels", []))


def without_hierarchy(g: Grammar) -> Grammar:
    """``g`` as saved before the cycle hierarchy was kept: coarse-to-fine then prunes through
    the base symbols alone (to compare both, and to read older files)."""
    latent = {k: v for k, v in g.meta.get("latent", {}).items() if k != "levels"}
    return Grammar(
        symbols=g.symbols,
        start=g.start,
        bin_parent=g.bin_parent,
        bin_left=g.bin_left,
        bin_right=g.bin_right,
        bin_logp=g.bin_logp,
        un_parent=g.un_parent,
        un_child=g.un_child,
        un_chain=g.un_chain,
        un_logp=g.un_logp,
        chains=g.chains,
        lex_symbols=g.lex_symbols,
        lex_logp=g.lex_logp,
        vocab=g.vocab,
        signatures=g.signatures,
        meta={**g.meta, "latent": latent},
    )


def level_grammar(g: Grammar, level: int) -> tuple[Grammar, np.ndarray]:
    """The projection of refined grammar ``g`` onto level ``level`` of its cycle hierarchy
    (0: the base symbols, as :func:`coarse_grammar`; L: the sub-symbols after L split-merge
    cycles), weighted as :func:`coarse_grammar` does, so every level is a projection of the
    same grammar (Petrov and Klein 2007's hierarchical coarse-to-fine, from memory); and the
    level symbol of each symbol of ``g``. Cached on ``g``."""
    if level == 0:
        return coarse_grammar(g)
    cache = g.__dict__.setdefault("_levels", {})
    if level not in cache:
        info = g.meta["latent"]["levels"][level]
        ks = np.asarray(info["ks"], dtype=np.int64)
        to_level = np.asarray(info["ancestor"], dtype=np.int64)
        base_names = coarse_grammar(g)[0].symbols
        names = [
            name if k == 1 else f"{name}{SUBSYMBOL}{x}"
            for name, k in zip(base_names, ks, strict=True)
            for x in range(int(k))
        ]
        cache[level] = _project(g, to_level, names)
    return cast(tuple[Grammar, np.ndarray], cache[level])


def _project(g: Grammar, to_coarse: np.ndarray, names: Sequence[str]) -> tuple[Grammar, np.ndarray]:
    """``g`` projected onto the symbols ``names`` (symbol i of ``g`` onto ``to_coarse[i]``)."""
    n = len(names)
    if "_expected" not in g.__dict__:
        g.__dict__["_expected"] = expected_counts(g)
    c_top, c_bot = g.__dict__["_expected"]
    tot_top = np.bincount(to_coarse, c_top, minlength=n)
    tot_bot = np.bincount(to_coarse, c_bot, minlength=n)

    def project(
        keys: np.ndarray, w: np.ndarray, weight: np.ndarray, total: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        uniq, inv = np.unique(keys, axis=0, return_inverse=True)
        mass = np.bincount(inv.ravel(), w * weight, minlength=len(uniq))
        with np.errstate(divide="ignore"):
            logp = np.log(mass) - np.log(np.maximum(total[uniq[:, 0]], 1e-300))
        keep = mass > 0
        return uniq[keep], logp[keep]

    bkeys = np.stack(
        [to_coarse[g.bin_parent], to_coarse[g.bin_left], to_coarse[g.bin_right]], axis=1
    )
    bins, blogp = project(bkeys, np.exp(g.bin_logp), c_bot[g.bin_parent], tot_bot)
    ukeys = np.stack([to_coarse[g.un_parent], to_coarse[g.un_child], g.un_chain], axis=1)
    edges, ulogp = project(ukeys, np.exp(g.un_logp), c_top[g.un_parent], tot_top)
    lex_c = to_coarse[g.lex_symbols]
    lex_ids = np.unique(lex_c)
    row = np.searchsorted(lex_ids, lex_c)
    with np.errstate(under="ignore"):
        lex = np.zeros((len(lex_ids), g.lex_logp.shape[1]))
        np.add.at(lex, row, np.exp(g.lex_logp) * c_bot[g.lex_symbols][:, None])
    with np.errstate(divide="ignore"):
        lex_logp = np.log(lex) - np.log(np.maximum(tot_bot[lex_ids], 1e-300))[:, None]
    meta = {k: v for k, v in g.meta.items() if k != "latent"}
    coarse = Grammar(
        symbols=list(names),
        start=int(to_coarse[g.start]),
        bin_parent=bins[:, 0],
        bin_left=bins[:, 1],
        bin_right=bins[:, 2],
        bin_logp=blogp,
        un_parent=edges[:, 0],
        un_child=edges[:, 1],
        un_chain=edges[:, 2],
        un_logp=ulogp,
        chains=g.chains,
        lex_symbols=lex_ids,
        lex_logp=lex_logp,
        vocab=g.vocab,
        signatures=g.signatures,
        meta=meta,
    )
    return coarse, to_coarse


def train_refined(
    trees: Sequence[Tree],
    cycles: int,
    options: RefineOptions | None = None,
    progress: LatentProgress | None = None,
    after_cycle: Callable[[int, Grammar], None] | None = None,
    prune: float = DEFAULT_PRUNE,
) -> Grammar:
    """A grammar for parsing: :data:`COARSE_BASE` trained on ``trees``, refined by ``cycles``
    split-merge cycles and exported (:meth:`LatentGrammar.to_grammar` with ``prune``);
    ``after_cycle(cycle, grammar)`` sees each cycle's exported grammar."""
    from parser.grammar import train_grammar

    if cycles < 1:
        raise GrammarError(f"refinement needs at least one cycle, got {cycles}")
    opts = options or RefineOptions()
    opts = RefineOptions(**{**opts.__dict__, "cycles": cycles})
    base = train_grammar(trees, **COARSE_BASE)

    def export(cycle: int, lg: LatentGrammar) -> None:
        if after_cycle is not None and cycle < cycles:
            after_cycle(cycle, lg.to_grammar(prune=prune))

    g = refine(base, trees, opts, progress=progress, after_cycle=export).to_grammar(prune=prune)
    if after_cycle is not None:
        after_cycle(cycles, g)
    return g
