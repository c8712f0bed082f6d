"""Compiled CKY inner loops (numba): Viterbi, scaled inside, scaled outside with span posteriors.

What it computes, for a sentence of n words and a grammar of N symbols (model in
:mod:`parser.grammar`): per span ``s = sid[i, k]`` (0-based, end-exclusive) a *bottom* layer
(binary rules or the lexicon) and a *top* layer (one unary edge, the identity included, over
the bottom layer).

Layout: besides the span-major arrays ``[s, symbol]``, each pass keeps the top layer twice,
by start (``XL[a, i, j]`` = span (i, j)) and by end (``XR[a, k, j]`` = span (j, k)), so that for a
span (i, k) and a binary rule A -> B C the scores of all split points are two contiguous vectors
``XL[B, i, i+1:k]`` and ``XR[C, k, i+1:k]``: the loop over split points is a short, branch-free,
vectorizable reduction.

* :func:`viterbi`: max-product log scores and, per bottom cell, the best rule (its split point
  is recovered from the chart). A pair of children is skipped when, for each of its rules, the
  best left score plus the best right score plus the rule's weight cannot beat its parent's
  current best: an exact bound, the result is the same as the full loop.
* :func:`inside`: sum-product scores kept as ``value * exp(sigma[s])`` with each span's vector
  scaled to a maximum of 1, so nothing underflows whatever the sentence length.
* :func:`outside`: outside scores scaled so that ``outside_top * inside_top`` is directly the
  posterior of a top node; accumulates the posteriors of labelled spans via the unary edges,
  and of each word's preterminal symbols.

Constraints enter as per-span data: ``dead[s]`` (span crosses a required span: no node at all)
and ``code[s]``: -1 free, -2 forbidden (no node of the user's label set), otherwise required
with the label ids ``req_lab[req_off[s]:req_off[s + 1]]`` (none listed: any node). ``backoff``
is the log weight of an edge over a required span that lacks the required labels: NEG keeps
the constraint strict; a small probability (the *relabel back-off*) lets any node over the span
stand in for the required label at that price, so a required labelled span never empties the
chart (the caller puts the label on the node afterwards).

Coarse-to-fine pruning enters as ``allow[s, a]`` (with ``use_allow``; otherwise a dummy
array): a cell not allowed gets no bottom and no top score, so nothing is built from it; the
outside pass needs no mask (a pruned cell has inside score 0). With ``want_symbols`` the
outside pass also returns the posterior of each (span, symbol), the larger of its top and
bottom node's, which a coarser grammar's pass hands to the finer one as its mask.

Binary rules come grouped by their right-hand side (``p_left[q] p_right[q]`` for the rules
``p_off[q]:p_off[q + 1]``, each with its parent and weight), so that the loop over split points
runs once per distinct pair of children rather than once per rule (a GUM grammar has about
2.3 rules per pair).

Complexity: O(n^3 P + n^2 R) time per pass (P child pairs, R binary rules), O(n^2 N) memory.
Limits: float64. The kernels release the GIL (``nogil=True``): a long parse in one thread
leaves the interpreter to the others (a web server's other requests).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

NEG_INF = -np.inf
#: "Impossible" in the Viterbi kernel (finite, so fast-math stays valid); LOW: any score at
#: or below it is impossible (a sum of a few NEG values and real log-probabilities).
NEG = -1e100
LOW = -1e99


@njit(cache=True, inline="always")
def _edge_logw(
    e: int,
    kind: int,
    s: int,
    code: np.ndarray,
    req_off: np.ndarray,
    req_lab: np.ndarray,
    nonempty: np.ndarray,
    haslab: np.ndarray,
    backoff: float,
) -> float:
    """Log weight the constraints add to unary edge ``e`` over span ``s``: 0 (free), NEG
    (excluded) or, on a required span whose labels the edge lacks, ``backoff`` (NEG: strict)."""
    c = code[s]
    if c == -1:
        return 0.0
    if c == -2:
        return NEG if nonempty[e, kind] else 0.0
    if kind == 1 and not nonempty[e, 1]:
        return backoff
    for q in range(req_off[s], req_off[s + 1]):
        if not haslab[e, kind, req_lab[q]]:
            return backoff
    return 0.0


@njit(cache=True, inline="always")
def _span_edges(
    OL, OR, i, k, s, kind, ibot, up, uc, uw, code, req_off, req_lab, nonempty, haslab, backoff,
    otop, obot, pe,
):  # fmt: skip
    """The outside pass at span ``s`` = (i, k) through its unary edges: fills ``otop`` (outside
    of each top), adds to ``obot`` (outside of each bottom) and sets ``pe[e]`` (posterior of
    edge e over the span; zeros expected). False when nothing reaches the span."""
    any_out = False
    for a in range(otop.shape[0]):
        otop[a] = OL[i, a, k] + OR[k, a, i]
        if otop[a] != 0.0:
            any_out = True
    if not any_out:
        return False
    for e in range(up.shape[0]):
        oa = otop[up[e]]
        if oa == 0.0:
            continue
        bv = ibot[uc[e]]
        if bv == 0.0:
            continue
        pen = _edge_logw(e, kind, s, code, req_off, req_lab, nonempty, haslab, backoff)
        if pen <= LOW:
            continue
        w = uw[e] * (1.0 if pen == 0.0 else np.exp(pen))
        obot[uc[e]] += oa * w
        pe[e] = oa * w * bv
    return True


@njit(cache=True, inline="always")
def _any_allowed(allow, s):
    """Whether coarse-to-fine pruning keeps any symbol of span ``s`` (a span with none holds
    nothing, so the passes skip it whole)."""
    for a in range(allow.shape[1]):
        if allow[s, a]:
            return True
    return False


@njit(cache=True, inline="always", fastmath=True)
def _split_max(XL, XR, i, k, floor, maxl, maxr):
    """maxl[a] = max over split points j of XL[i, a, j]; maxr[a] likewise of XR[k, a, j]."""
    for a in range(XL.shape[1]):
        m = floor
        for j in range(i + 1, k):
            m = max(m, XL[i, a, j])
        maxl[a] = m
        m = floor
        for j in range(i + 1, k):
            m = max(m, XR[k, a, j])
        maxr[a] = m


@njit(cache=True, parallel=True, fastmath=True, nogil=True)
def viterbi(
    n,
    n_sym,
    sid,
    dead,
    code,
    req_off,
    req_lab,
    lex,
    p_left,
    p_right,
    p_off,
    r_parent,
    r_logp,
    up,
    uc,
    ulogp,
    nonempty,
    haslab,
    backoff,
    allow,
    use_allow,
):
    """Max-product chart over finite scores: "impossible" is :data:`NEG` (so the loops may be
    compiled with fast-math), ``lex`` must use NEG too. Returns vt, vb (float64[S, N] top/bottom
    log scores), bp_rule (int32[S, N]: best binary rule of each bottom), bp_edge (int32[S, N]:
    best unary edge of each top), and the by-start / by-end views VL, VR
    (float64[n + 1, N, n + 1]). Spans of one length are filled in parallel."""
    n_span = n * (n + 1) // 2
    vt = np.full((n_span, n_sym), NEG)
    vb = np.full((n_span, n_sym), NEG)
    bp_rule = np.full((n_span, n_sym), -1, np.int32)
    bp_edge = np.full((n_span, n_sym), -1, np.int32)
    VL = np.full((n + 1, n_sym, n + 1), NEG)
    VR = np.full((n + 1, n_sym, n + 1), NEG)
    n_edge = up.shape[0]
    n_pair = p_left.shape[0]
    for length in range(1, n + 1):
        for i in prange(n - length + 1):
            k = i + length
            s = sid[i, k]
            if dead[s] or (use_allow and not _any_allowed(allow, s)):
                continue
            bot = vb[s]
            if length == 1:
                for a in range(n_sym):
                    bot[a] = lex[i, a]
            else:
                maxl = np.empty(n_sym)
                maxr = np.empty(n_sym)
                _split_max(VL, VR, i, k, NEG, maxl, maxr)
                brule = bp_rule[s]
                for q in range(n_pair):
                    b = p_left[q]
                    c = p_right[q]
                    bound = maxl[b] + maxr[c]
                    if bound <= LOW:
                        continue
                    hope = False
                    for r in range(p_off[q], p_off[q + 1]):
                        if bound + r_logp[r] > bot[r_parent[r]]:
                            hope = True
                            break
                    if not hope:
                        continue
                    m = NEG
                    for j in range(i + 1, k):
                        m = max(m, VL[i, b, j] + VR[k, c, j])
                    for r in range(p_off[q], p_off[q + 1]):
                        a = r_parent[r]
                        sc = m + r_logp[r]
                        if sc > bot[a]:
                            bot[a] = sc
                            brule[a] = r
            if use_allow:
                for a in range(n_sym):
                    if not allow[s, a]:
                        bot[a] = NEG
            kind = 0 if length == 1 else 1
            top = vt[s]
            bedge = bp_edge[s]
            for e in range(n_edge):
                bv = bot[uc[e]]
                if bv <= LOW:
                    continue
                if use_allow and not allow[s, up[e]]:
                    continue
                pen = _edge_logw(e, kind, s, code, req_off, req_lab, nonempty, haslab, backoff)
                if pen <= LOW:
                    continue
                sc = bv + ulogp[e] + pen
                a = up[e]
                if sc > top[a]:
                    top[a] = sc
                    bedge[a] = e
            for a in range(n_sym):
                VL[i, a, k] = top[a]
                VR[k, a, i] = top[a]
    return vt, vb, bp_rule, bp_edge, VL, VR


@njit(cache=True, parallel=True, fastmath=True, nogil=True)
def inside(
    n,
    n_sym,
    sid,
    dead,
    code,
    req_off,
    req_lab,
    lex,
    vt,
    p_left,
    p_right,
    p_off,
    r_parent,
    r_w,
    up,
    uc,
    uw,
    nonempty,
    haslab,
    backoff,
    allow,
    use_allow,
):
    """Scaled inside chart. Returns it, ib (float64[S, N]), sigma (float64[S]) and the views
    IL, IR (float64[N, n + 1, n + 1]) of ``it``.

    True inside score = it[s, a] * exp(sigma[s]) (likewise ib); max over a of it and ib is 1.
    Spans with no finite Viterbi top score (``vt``) are skipped: they hold no tree (a ``vt``
    of zeros looks everywhere; a span whose scores all come out zero then counts as empty).
    """
    n_span = n * (n + 1) // 2
    it = np.zeros((n_span, n_sym))
    ib = np.zeros((n_span, n_sym))
    # NEG for a span that holds nothing: the outside pass's split weights exp(sigma_left +
    # sigma_right - sigma_parent) are then 0 there, never an overflow times a zero score.
    sigma = np.full(n_span, NEG)
    IL = np.zeros((n + 1, n_sym, n + 1))
    IR = np.zeros((n + 1, n_sym, n + 1))
    live = np.zeros(n_span, np.bool_)
    n_edge = up.shape[0]
    n_pair = p_left.shape[0]
    for length in range(1, n + 1):
        for i in prange(n - length + 1):
            k = i + length
            s = sid[i, k]
            if dead[s] or (use_allow and not _any_allowed(allow, s)):
                continue
            any_top = False
            for a in range(n_sym):
                if vt[s, a] > LOW:
                    any_top = True
                    break
            if not any_top:
                continue
            live[s] = True
            bot = ib[s]
            if length == 1:
                m = NEG
                for a in range(n_sym):
                    m = max(m, lex[i, a])
                for a in range(n_sym):
                    if lex[i, a] > LOW:
                        bot[a] = np.exp(lex[i, a] - m)
                sigma[s] = m
            else:
                f = np.zeros(n + 1)
                maxl = np.empty(n_sym)
                maxr = np.empty(n_sym)
                big = NEG
                for j in range(i + 1, k):
                    sl = sid[i, j]
                    sr = sid[j, k]
                    if live[sl] and live[sr]:
                        big = max(big, sigma[sl] + sigma[sr])
                for j in range(i + 1, k):
                    sl = sid[i, j]
                    sr = sid[j, k]
                    f[j] = np.exp(sigma[sl] + sigma[sr] - big) if live[sl] and live[sr] else 0.0
                _split_max(IL, IR, i, k, 0.0, maxl, maxr)
                for q in range(n_pair):
                    b = p_left[q]
                    c = p_right[q]
                    if maxl[b] == 0.0 or maxr[c] == 0.0:
                        continue
                    acc = 0.0
                    for j in range(i + 1, k):
                        acc += IL[i, b, j] * IR[k, c, j] * f[j]
                    for r in range(p_off[q], p_off[q + 1]):
                        bot[r_parent[r]] += acc * r_w[r]
                sigma[s] = big
            if use_allow:
                for a in range(n_sym):
                    if not allow[s, a]:
                        bot[a] = 0.0
            kind = 0 if length == 1 else 1
            top = it[s]
            for e in range(n_edge):
                bv = bot[uc[e]]
                if bv == 0.0:
                    continue
                if use_allow and not allow[s, up[e]]:
                    continue
                pen = _edge_logw(e, kind, s, code, req_off, req_lab, nonempty, haslab, backoff)
                if pen <= LOW:
                    continue
                top[up[e]] += bv * uw[e] * (1.0 if pen == 0.0 else np.exp(pen))
            c = 0.0
            for a in range(n_sym):
                c = max(c, top[a])
                c = max(c, bot[a])
            if c > 0.0:
                inv = 1.0 / c
                for a in range(n_sym):
                    top[a] *= inv
                    bot[a] *= inv
                sigma[s] += np.log(c)
            else:
                # Nothing built here (possible when ``vt`` only marks where to look): no
                # parent may count on it, and its scale must not weigh in theirs.
                live[s] = False
                sigma[s] = NEG
            for a in range(n_sym):
                IL[i, a, k] = top[a]
                IR[k, a, i] = top[a]
    return it, ib, sigma, IL, IR


@njit(cache=True, parallel=True, fastmath=True, nogil=True)
def outside(
    n,
    n_sym,
    start,
    sid,
    dead,
    code,
    req_off,
    req_lab,
    it,
    ib,
    sigma,
    IL,
    IR,
    p_left,
    p_right,
    p_off,
    r_parent,
    r_w,
    up,
    uc,
    uw,
    nonempty,
    haslab,
    lab_off,
    lab_ids,
    n_labels,
    backoff,
    want_symbols,
):
    """Scaled outside pass; returns post: float64[S, n_labels], the posterior of each labelled
    span (for edge e and kind k, the labels of its nodes are
    ``lab_ids[lab_off[2 * e + k]:lab_off[2 * e + k + 1]]``), tpost: float64[n, N], the
    posterior of each symbol as word i's preterminal, spost (see the module docstring) and the
    outside tops OL, OR (below; :func:`max_rule` reads them).

    Outside scores of tops accumulate in OL[a, i, j] (span (i, j) as a left child, or the root)
    and OR[a, k, j] (span (j, k) as a right child), scaled so that outside * inside / Z of a
    node is the product of the stored values.
    """
    n_span = n * (n + 1) // 2
    post = np.zeros((n_span, n_labels))
    tpost = np.zeros((n, n_sym))
    spost = np.zeros((n_span if want_symbols else 1, n_sym if want_symbols else 1))
    OL = np.zeros((n + 1, n_sym, n + 1))
    OR = np.zeros((n + 1, n_sym, n + 1))
    n_edge = up.shape[0]
    n_pair = p_left.shape[0]
    full = sid[0, n]
    if it[full, start] == 0.0:
        return post, tpost, spost, OL, OR
    OL[0, start, n] = 1.0 / it[full, start]
    for length in range(n, 0, -1):
        for i in prange(n - length + 1):
            k = i + length
            s = sid[i, k]
            if dead[s]:
                continue
            otop = np.empty(n_sym)
            obot = np.zeros(n_sym)
            pe = np.zeros(n_edge)
            kind = 0 if length == 1 else 1
            ibot = ib[s]
            if not _span_edges(
                OL, OR, i, k, s, kind, ibot, up, uc, uw, code, req_off, req_lab, nonempty,
                haslab, backoff, otop, obot, pe,
            ):  # fmt: skip
                continue
            for e in range(n_edge):
                if pe[e] == 0.0:
                    continue
                for q in range(lab_off[2 * e + kind], lab_off[2 * e + kind + 1]):
                    post[s, lab_ids[q]] += pe[e]
            if want_symbols:
                itop = it[s]
                for a in range(n_sym):
                    spost[s, a] = max(otop[a] * itop[a], obot[a] * ibot[a])
            if length == 1:
                for b in range(n_sym):
                    tpost[i, b] = obot[b] * ibot[b]
                continue
            f = np.zeros(n + 1)
            maxl = np.empty(n_sym)
            maxr = np.empty(n_sym)
            for j in range(i + 1, k):
                sl = sid[i, j]
                sr = sid[j, k]
                f[j] = np.exp(sigma[sl] + sigma[sr] - sigma[s])
            _split_max(IL, IR, i, k, 0.0, maxl, maxr)
            for q in range(n_pair):
                b = p_left[q]
                c = p_right[q]
                if maxl[b] == 0.0 or maxr[c] == 0.0:
                    continue
                g = 0.0
                for r in range(p_off[q], p_off[q + 1]):
                    g += obot[r_parent[r]] * r_w[r]
                if g == 0.0:
                    continue
                for j in range(i + 1, k):
                    OL[i, b, j] += g * IR[k, c, j] * f[j]
                    OR[k, c, j] += g * IL[i, b, j] * f[j]
    return post, tpost, spost, OL, OR


@njit(cache=True, parallel=True, fastmath=True, nogil=True)
def max_rule(
    n,
    n_sym,
    sid,
    dead,
    code,
    req_off,
    req_lab,
    ib,
    sigma,
    IL,
    IR,
    OL,
    OR,
    p_left,
    p_right,
    p_off,
    g_off,
    g_rules,
    g_coarse,
    r_parent,
    r_w,
    up,
    uc,
    uw,
    e_coarse,
    nonempty,
    haslab,
    backoff,
    to_coarse,
    n_coarse,
    c_parent,
    c_left,
    c_right,
    ce_parent,
    ce_child,
):
    """Max-rule-product chart over coarse symbols (Petrov and Klein 2007, "Improved inference
    for unlexicalized parsing", NAACL): every anchored coarse rule (a binary rule with its
    split point, a unary edge over its span, a word's preterminal) scores the log of its
    posterior under the fine grammar, the sum over the sub-symbols of its symbols; the chart
    maximizes the sum of these logs over trees of coarse symbols.

    Fine binary rules come per child pair ``q`` in groups of one coarse rule: group ``h`` of
    pair ``q`` (``g_off[q] <= h < g_off[q + 1]``) is coarse rule ``g_coarse[h]``, made of the
    fine rules ``g_rules[h]:g_rules[h + 1]`` of ``r_parent``, ``r_w`` (in group order); fine
    edge ``e`` is coarse edge ``e_coarse[e]``. The fine chart's scaled inside and outside
    scores give each posterior as in :func:`outside`. Returns MT, MB (float64[S, C]: best top
    and bottom scores, NEG for none), bp_rule, bp_split (int32[S, C]: the bottom's coarse rule
    and split point) and bp_edge (int32[S, C]: the top's coarse edge).
    """
    n_span = n * (n + 1) // 2
    MT = np.full((n_span, n_coarse), NEG)
    MB = np.full((n_span, n_coarse), NEG)
    bp_rule = np.full((n_span, n_coarse), -1, np.int32)
    bp_split = np.full((n_span, n_coarse), -1, np.int32)
    bp_edge = np.full((n_span, n_coarse), -1, np.int32)
    n_edge = up.shape[0]
    n_pair = p_left.shape[0]
    n_crule = c_parent.shape[0]
    n_cedge = ce_parent.shape[0]
    for length in range(1, n + 1):
        for i in prange(n - length + 1):
            k = i + length
            s = sid[i, k]
            if dead[s]:
                continue
            otop = np.empty(n_sym)
            obot = np.zeros(n_sym)
            pe = np.zeros(n_edge)
            kind = 0 if length == 1 else 1
            ibot = ib[s]
            if not _span_edges(
                OL, OR, i, k, s, kind, ibot, up, uc, uw, code, req_off, req_lab, nonempty,
                haslab, backoff, otop, obot, pe,
            ):  # fmt: skip
                continue
            epost = np.zeros(n_cedge)
            for e in range(n_edge):
                epost[e_coarse[e]] += pe[e]
            if length == 1:
                bpost = np.zeros(n_coarse)
                for b in range(n_sym):
                    bpost[to_coarse[b]] += obot[b] * ibot[b]
                for cb in range(n_coarse):
                    if bpost[cb] > 0.0:
                        MB[s, cb] = np.log(bpost[cb])
            else:
                f = np.zeros(n + 1)
                for j in range(i + 1, k):
                    f[j] = np.exp(sigma[sid[i, j]] + sigma[sid[j, k]] - sigma[s])
                maxl = np.empty(n_sym)
                maxr = np.empty(n_sym)
                _split_max(IL, IR, i, k, 0.0, maxl, maxr)
                acc = np.zeros((n_crule, n + 1))
                for q in range(n_pair):
                    b = p_left[q]
                    c = p_right[q]
                    if maxl[b] == 0.0 or maxr[c] == 0.0:
                        continue
                    for h in range(g_off[q], g_off[q + 1]):
                        g = 0.0
                        for x in range(g_rules[h], g_rules[h + 1]):
                            g += obot[r_parent[x]] * r_w[x]
                        if g == 0.0:
                            continue
                        row = acc[g_coarse[h]]
                        for j in range(i + 1, k):
                            row[j] += g * IL[i, b, j] * IR[k, c, j] * f[j]
                for cr in range(n_crule):
                    row = acc[cr]
                    a = c_parent[cr]
                    for j in range(i + 1, k):
                        if row[j] <= 0.0:
                            continue
                        left = MT[sid[i, j], c_left[cr]]
                        right = MT[sid[j, k], c_right[cr]]
                        if left <= LOW or right <= LOW:
                            continue
                        sc = np.log(row[j]) + left + right
                        if sc > MB[s, a]:
                            MB[s, a] = sc
                            bp_rule[s, a] = cr
                            bp_split[s, a] = j
            for ce in range(n_cedge):
                if epost[ce] <= 0.0:
                    continue
                below = MB[s, ce_child[ce]]
                if below <= LOW:
                    continue
                sc = np.log(epost[ce]) + below
                a = ce_parent[ce]
                if sc > MT[s, a]:
                    MT[s, a] = sc
                    bp_edge[s, a] = ce
    return MT, MB, bp_rule, bp_split, bp_edge
