"""Compiled CKY inner loops (numba): Viterbi, scaled inside, scaled outside with span posteriors.

What it computes, for a sentence of n words and a grammar of N symbols (model in
:mod:`parser.grammar`): charts indexed by span id ``s = sid[i, k]`` (0-based, end-exclusive)
and symbol, each span holding a *bottom* layer (binary rules or the lexicon) and a *top* layer
(one unary edge, the identity included, over the bottom layer).

* :func:`viterbi`: max-product log scores with back-pointers, plus the list of symbols whose top
  score is finite per span (``act``/``nact``), which the other passes reuse to skip dead symbols.
* :func:`inside`: sum-product scores kept as ``value * exp(sigma[s])`` with each span's vector
  scaled to a maximum of 1, so no underflow whatever the sentence length.
* :func:`outside`: outside scores scaled so that ``outside_top * inside_top`` is directly the
  posterior of a top node; accumulates posteriors of labelled spans via the unary edges.

Constraints enter as per-span data: ``dead[s]`` (span crosses a required span: no node at all)
and ``code[s]``: -1 free, -2 forbidden (no node of the user's label set), otherwise required
with the label ids ``req_lab[req_off[s]:req_off[s + 1]]`` (none listed: any node).

Complexity: O(n^3 * R) time in the worst case for each pass (R binary rules), skipping left
children whose score is zero; O(n^2 * N) memory. Limits: float64; spans are processed serially.
"""

from __future__ import annotations

import numpy as np
from numba import njit

NEG_INF = -np.inf


@njit(cache=True, inline="always")
def _allowed(e: int, kind: int, s: int, code: np.ndarray, req_off: np.ndarray,
             req_lab: np.ndarray, nonempty: np.ndarray, haslab: np.ndarray) -> bool:
    c = code[s]
    if c == -1:
        return True
    if c == -2:
        return not nonempty[e, kind]
    if kind == 1 and not nonempty[e, 1]:
        return False
    for q in range(req_off[s], req_off[s + 1]):
        if not haslab[e, kind, req_lab[q]]:
            return False
    return True


@njit(cache=True)
def viterbi(n, n_sym, sid, dead, code, req_off, req_lab, lex,
            lo_off, lo_right, lo_parent, lo_logp,
            up, uc, ulogp, nonempty, haslab):
    """Max-product chart. Returns vt, vb, bp_rule, bp_split, bp_edge, act, nact.

    vt, vb: float64[S, N] top/bottom log scores; bp_rule/bp_split: int32[S, N] best binary rule
    (index in the left-sorted rule arrays) and split of each bottom; bp_edge: int32[S, N] best
    unary edge of each top; act: int32[S, N], nact: int32[S] finite tops per span.
    """
    n_span = n * (n + 1) // 2
    vt = np.full((n_span, n_sym), NEG_INF)
    vb = np.full((n_span, n_sym), NEG_INF)
    bp_rule = np.full((n_span, n_sym), -1, np.int32)
    bp_split = np.full((n_span, n_sym), -1, np.int32)
    bp_edge = np.full((n_span, n_sym), -1, np.int32)
    act = np.empty((n_span, n_sym), np.int32)
    nact = np.zeros(n_span, np.int32)
    n_edge = up.shape[0]
    for length in range(1, n + 1):
        for i in range(n - length + 1):
            k = i + length
            s = sid[i, k]
            if dead[s]:
                continue
            bot = vb[s]
            if length == 1:
                for a in range(n_sym):
                    bot[a] = lex[i, a]
            else:
                brule = bp_rule[s]
                bsplit = bp_split[s]
                for j in range(i + 1, k):
                    sl = sid[i, j]
                    sr = sid[j, k]
                    if nact[sl] == 0 or nact[sr] == 0:
                        continue
                    left = vt[sl]
                    right = vt[sr]
                    for q in range(nact[sl]):
                        b = act[sl, q]
                        lb = left[b]
                        for r in range(lo_off[b], lo_off[b + 1]):
                            rv = right[lo_right[r]]
                            if rv == NEG_INF:
                                continue
                            sc = lb + rv + lo_logp[r]
                            p = lo_parent[r]
                            if sc > bot[p]:
                                bot[p] = sc
                                brule[p] = r
                                bsplit[p] = j
            kind = 0 if length == 1 else 1
            top = vt[s]
            bedge = bp_edge[s]
            for e in range(n_edge):
                bv = bot[uc[e]]
                if bv == NEG_INF:
                    continue
                if not _allowed(e, kind, s, code, req_off, req_lab, nonempty, haslab):
                    continue
                sc = bv + ulogp[e]
                a = up[e]
                if sc > top[a]:
                    top[a] = sc
                    bedge[a] = e
            m = 0
            for a in range(n_sym):
                if top[a] > NEG_INF:
                    act[s, m] = a
                    m += 1
            nact[s] = m
    return vt, vb, bp_rule, bp_split, bp_edge, act, nact


@njit(cache=True)
def inside(n, n_sym, sid, dead, code, req_off, req_lab, lex, act, nact,
           lo_off, lo_right, lo_parent, lo_w, up, uc, uw, nonempty, haslab):
    """Scaled inside chart. Returns it, ib (float64[S, N]) and sigma (float64[S]).

    True inside score = it[s, a] * exp(sigma[s]) (likewise ib); max over a of it and ib is 1.
    """
    n_span = n * (n + 1) // 2
    it = np.zeros((n_span, n_sym))
    ib = np.zeros((n_span, n_sym))
    sigma = np.zeros(n_span)
    n_edge = up.shape[0]
    for length in range(1, n + 1):
        for i in range(n - length + 1):
            k = i + length
            s = sid[i, k]
            if dead[s] or nact[s] == 0:
                continue
            bot = ib[s]
            if length == 1:
                m = NEG_INF
                for a in range(n_sym):
                    if lex[i, a] > m:
                        m = lex[i, a]
                for a in range(n_sym):
                    if lex[i, a] > NEG_INF:
                        bot[a] = np.exp(lex[i, a] - m)
                sigma[s] = m
            else:
                big = NEG_INF
                for j in range(i + 1, k):
                    sl = sid[i, j]
                    sr = sid[j, k]
                    if nact[sl] == 0 or nact[sr] == 0:
                        continue
                    v = sigma[sl] + sigma[sr]
                    if v > big:
                        big = v
                for j in range(i + 1, k):
                    sl = sid[i, j]
                    sr = sid[j, k]
                    if nact[sl] == 0 or nact[sr] == 0:
                        continue
                    f = np.exp(sigma[sl] + sigma[sr] - big)
                    left = it[sl]
                    right = it[sr]
                    for q in range(nact[sl]):
                        b = act[sl, q]
                        lb = left[b] * f
                        if lb == 0.0:
                            continue
                        for r in range(lo_off[b], lo_off[b + 1]):
                            rv = right[lo_right[r]]
                            if rv == 0.0:
                                continue
                            bot[lo_parent[r]] += lb * rv * lo_w[r]
                sigma[s] = big
            kind = 0 if length == 1 else 1
            top = it[s]
            for e in range(n_edge):
                bv = bot[uc[e]]
                if bv == 0.0:
                    continue
                if not _allowed(e, kind, s, code, req_off, req_lab, nonempty, haslab):
                    continue
                top[up[e]] += bv * uw[e]
            c = 0.0
            for a in range(n_sym):
                if top[a] > c:
                    c = top[a]
                if bot[a] > c:
                    c = bot[a]
            if c > 0.0:
                inv = 1.0 / c
                for a in range(n_sym):
                    top[a] *= inv
                    bot[a] *= inv
                sigma[s] += np.log(c)
    return it, ib, sigma


@njit(cache=True)
def outside(n, n_sym, start, sid, dead, code, req_off, req_lab, act, nact, it, ib, sigma,
            po_off, po_left, po_right, po_w, up, uc, uw, nonempty, haslab,
            lab_off, lab_ids, n_labels):
    """Scaled outside pass; returns post: float64[S, n_labels], the posterior of each labelled
    span (label ids as in ``lab_ids``: for edge e and kind k, the labels of its nodes are
    ``lab_ids[lab_off[2 * e + k]:lab_off[2 * e + k + 1]]``).
    """
    n_span = n * (n + 1) // 2
    ot = np.zeros((n_span, n_sym))
    ob = np.zeros((n_span, n_sym))
    post = np.zeros((n_span, n_labels))
    n_edge = up.shape[0]
    full = sid[0, n]
    if it[full, start] == 0.0:
        return post
    ot[full, start] = 1.0 / it[full, start]
    for length in range(n, 0, -1):
        for i in range(n - length + 1):
            k = i + length
            s = sid[i, k]
            if dead[s] or nact[s] == 0:
                continue
            kind = 0 if length == 1 else 1
            otop = ot[s]
            obot = ob[s]
            ibot = ib[s]
            for e in range(n_edge):
                oa = otop[up[e]]
                if oa == 0.0:
                    continue
                bv = ibot[uc[e]]
                if bv == 0.0:
                    continue
                if not _allowed(e, kind, s, code, req_off, req_lab, nonempty, haslab):
                    continue
                obot[uc[e]] += oa * uw[e]
                pe = oa * uw[e] * bv
                for q in range(lab_off[2 * e + kind], lab_off[2 * e + kind + 1]):
                    post[s, lab_ids[q]] += pe
            if length == 1:
                continue
            for j in range(i + 1, k):
                sl = sid[i, j]
                sr = sid[j, k]
                if nact[sl] == 0 or nact[sr] == 0:
                    continue
                f = np.exp(sigma[sl] + sigma[sr] - sigma[s])
                il = it[sl]
                ir = it[sr]
                ol = ot[sl]
                orr = ot[sr]
                for a in range(n_sym):
                    oa = obot[a]
                    if oa == 0.0:
                        continue
                    oa *= f
                    for r in range(po_off[a], po_off[a + 1]):
                        lv = il[po_left[r]]
                        if lv == 0.0:
                            continue
                        rv = ir[po_right[r]]
                        if rv == 0.0:
                            continue
                        g = oa * po_w[r]
                        ol[po_left[r]] += g * rv
                        orr[po_right[r]] += g * lv
    return post
