"""The k best derivations of a Viterbi chart, by lazy k-best extraction without recursion.

What it computes
    :class:`LazyKBest` is Huang and Chiang 2005, algorithm 3 ("lazy k-best"), on the
    hypergraph a Viterbi chart of :mod:`parser.chart` describes. Nodes are (TOP, span, symbol)
    and (BOT, span, symbol): a TOP node is reached from a BOT node by one unary chain (the
    identity included), a BOT node from two TOP nodes by a binary rule and a split point, or
    from a word by the lexicon. A node's candidate set starts with the best derivation along
    each incoming hyperedge, limited to the ``cap`` best of them: a node never yields more than
    ``cap`` derivations, and a hyperedge whose best derivation ranks below ``cap`` cannot hold
    one of the first ``cap``.

    The textbook statement is recursive (asking a node for its next derivation asks its
    children for theirs), so the depth of the call stack grows with the depth of the tree, and
    a 250-word sentence passes Python's recursion limit. Here every request is a pair (node,
    rank) on an explicit stack: a request whose node needs derivations of its children first
    pushes those requests above itself and is taken up again once they are met. Trees are
    built from a derivation the same way. The result is the same as the recursive algorithm's.

Complexity: O(k n log k) node visits for the k best derivations of an n-word sentence (each a
vectorized scan of one node's incoming rules at its first visit); memory O(visited nodes * k).
Limits: the hypergraph must be acyclic, which a chart with unary chains collapsed is.
"""

from __future__ import annotations

import heapq
import math
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from nltk import Tree

from parser import kernels
from parser.errors import ParserError

if TYPE_CHECKING:  # the chart imports this module; only its types are needed here
    from parser.chart import _Chart

TOP = 0
BOT = 1

Node = tuple[int, int, int]  # (TOP or BOT, span id, symbol)
Edge = tuple[Any, ...]  # ("u", unary edge), ("b", rule, split point) or ("l",)
#: A derivation: (log score, incoming edge, tail nodes, the rank wanted of each tail).
Deriv = tuple[float, Edge, tuple[Node, ...], tuple[int, ...]]
_Candidate = tuple[float, int, Edge, tuple[Node, ...], tuple[int, ...]]


def edge_logw(chart: _Chart, e: int, kind: int, s: int) -> float:
    """The log weight the chart's constraints add to unary edge ``e`` ending at span ``s``
    (the same as the compiled loops' ``_edge_logw``): 0, -inf for an excluded edge, or the
    relabel back-off over a required span whose labels the edge lacks."""
    p, tab = chart.p, chart.tab
    c = p.code[s]
    if c == -1:
        return 0.0
    nonempty = tab.nonempty
    if c == -2:
        return -math.inf if nonempty[e, kind] else 0.0
    backoff = -math.inf if p.backoff <= kernels.LOW else float(p.backoff)
    if kind == 1 and not nonempty[e, 1]:
        return backoff
    if all(tab.haslab[e, kind, lab] for lab in p.req_lab[p.req_off[s] : p.req_off[s + 1]]):
        return 0.0
    return backoff


def open_chain(chain: Sequence[str], children: list[Any]) -> tuple[Tree, Tree]:
    """The unary chain ``chain`` (top first) over ``children``: its top node and its lowest
    node, to which more children can be appended (a Tree copies the list it is given)."""
    bottom = Tree(chain[-1], children)
    node = bottom
    for label in reversed(chain[:-1]):
        node = Tree(label, [node])
    return node, bottom


class LazyKBest:
    """Lazy k-best on one chart; ask :meth:`get` for ranks in any order."""

    def __init__(self, chart: _Chart, cap: int) -> None:
        self.c = chart
        self.cap = cap
        self.derivs: dict[Node, list[Deriv]] = {}
        self.cand: dict[Node, list[_Candidate]] = {}
        self.seen: dict[Node, set[tuple[Edge, tuple[int, ...]]]] = {}
        self.expanded: dict[Node, int] = {}  # derivations whose successors are candidates
        self.shape_of: dict[tuple[Node, int], int] = {}  # see shape()
        self.shape_ids: dict[tuple[int, ...], int] = {}
        self.tick = 0
        p = chart.p
        self.start_of = np.empty(p.n * (p.n + 1) // 2, dtype=np.int64)
        self.end_of = np.empty_like(self.start_of)
        ii, kk = np.nonzero(p.sid >= 0)
        self.start_of[p.sid[ii, kk]] = ii
        self.end_of[p.sid[ii, kk]] = kk

    # ------------------------------------------------------------------ candidates
    def _t(self) -> int:
        self.tick += 1
        return self.tick

    def _init(self, node: Node) -> None:
        kind, s, a = node
        c, tab = self.c, self.c.tab
        i, k = int(self.start_of[s]), int(self.end_of[s])
        heap: list[_Candidate] = []
        if kind == TOP:
            lo, hi = int(tab.u_off[a]), int(tab.u_off[a + 1])
            es = np.arange(lo, hi)
            scores = tab.ulogp[es] + c.vb[s, tab.uc[es]]
            kind_id = 0 if k - i == 1 else 1
            for e, sc in zip(es, scores, strict=True):
                pen = edge_logw(c, int(e), kind_id, s)
                if sc == -np.inf or pen == -math.inf:
                    continue
                sc = sc + pen
                heap.append(
                    (-float(sc), self._t(), ("u", int(e)), ((BOT, s, int(tab.uc[e])),), (0,))
                )
        elif k - i == 1:
            sc = float(c.p.lex[i, a])
            if sc > -np.inf:
                heap.append((-sc, self._t(), ("l",), (), ()))
        else:
            lo, hi = int(tab.po_off[a]), int(tab.po_off[a + 1])
            if hi > lo:
                js = np.arange(i + 1, k)
                sl = c.p.sid[i, js]
                sr = c.p.sid[js, k]
                left = tab.po_left[lo:hi]
                right = tab.po_right[lo:hi]
                scores = (c.vt[sl][:, left] + c.vt[sr][:, right]) + tab.po_logp[lo:hi][None, :]
                flat = scores.ravel()
                finite = np.flatnonzero(flat > -np.inf)
                if len(finite) > self.cap:
                    part = np.argpartition(-flat[finite], self.cap - 1)[: self.cap]
                    finite = finite[part]
                n_rules = hi - lo
                for f in finite:
                    jx, rx = divmod(int(f), n_rules)
                    r = lo + rx
                    heap.append(
                        (
                            -float(flat[f]),
                            self._t(),
                            ("b", r, int(js[jx])),
                            (
                                (TOP, int(sl[jx]), int(tab.po_left[r])),
                                (TOP, int(sr[jx]), int(tab.po_right[r])),
                            ),
                            (0, 0),
                        )
                    )
        heapq.heapify(heap)
        self.cand[node] = heap
        self.seen[node] = {(item[2], item[4]) for item in heap}
        self.derivs[node] = []
        self.expanded[node] = 0

    def _weight(self, edge: Edge, node: Node) -> float:
        tab = self.c.tab
        if edge[0] == "u":
            s = node[1]
            kind_id = 0 if self.end_of[s] - self.start_of[s] == 1 else 1
            return float(tab.ulogp[edge[1]]) + edge_logw(self.c, edge[1], kind_id, s)
        if edge[0] == "b":
            return float(tab.po_logp[edge[1]])
        return float(self.c.p.lex[int(self.start_of[node[1]]), node[2]])

    def _settled(self, node: Node, rank: int) -> bool:
        """Whether ``node`` has its rank-th derivation or provably never will."""
        if node not in self.derivs:
            return False
        found = self.derivs[node]
        return len(found) > rank or (self.expanded[node] == len(found) and not self.cand[node])

    # ------------------------------------------------------------------ derivations
    def get(self, node: Node, rank: int) -> Deriv | None:
        """The rank-th best derivation of ``node`` (0-based), or None if it has fewer."""
        stack: list[tuple[Node, int]] = [(node, rank)]
        while stack:
            nd, rk = stack[-1]
            if nd not in self.derivs:
                self._init(nd)
            found = self.derivs[nd]
            if len(found) > rk:
                stack.pop()
                continue
            if found and self.expanded[nd] < len(found):
                # the successors of the last derivation become candidates; each needs the
                # next derivation of one tail, which may have to be found first
                _, edge, tails, ranks = found[-1]
                wanted = [
                    (tails[x], ranks[x] + 1)
                    for x in range(len(tails))
                    if (edge, ranks[:x] + (ranks[x] + 1,) + ranks[x + 1 :]) not in self.seen[nd]
                ]
                missing = [(t, r) for t, r in wanted if not self._settled(t, r)]
                if missing:
                    stack.extend(missing)
                    continue
                self._push_successors(nd, found[-1])
                self.expanded[nd] = len(found)
            heap = self.cand[nd]
            if not heap:
                stack.pop()  # fewer than rk + 1 derivations
                continue
            neg, _, edge, tails, ranks = heapq.heappop(heap)
            found.append((-neg, edge, tails, ranks))
        found = self.derivs[node]
        return found[rank] if rank < len(found) else None

    def _push_successors(self, node: Node, d: Deriv) -> None:
        """Algorithm 3's LazyNext, once every tail derivation it needs is known."""
        _, edge, tails, ranks = d
        seen = self.seen[node]
        for x in range(len(tails)):
            new = ranks[:x] + (ranks[x] + 1,) + ranks[x + 1 :]
            if (edge, new) in seen:
                continue
            tail_found = self.derivs[tails[x]]
            if new[x] >= len(tail_found):
                continue  # that tail has no further derivation
            seen.add((edge, new))
            score = self._weight(edge, node) + sum(
                self.derivs[t][r][0] for t, r in zip(tails, new, strict=True)
            )
            heapq.heappush(self.cand[node], (-score, self._t(), edge, tails, new))

    # ------------------------------------------------------------------ trees
    def _known(self, node: Node, rank: int) -> Deriv:
        found = self.derivs.get(node)
        if found is not None and rank < len(found):
            return found[rank]
        d = self.get(node, rank)
        if d is None:
            raise ParserError(f"k-best: node {node} has no derivation of rank {rank}")
        return d

    def build(self, node: Node, rank: int, words: Sequence[str]) -> Tree:
        """The binarized tree of a TOP node's rank-th derivation (built without recursion)."""
        holder: list[Any] = []
        todo: list[tuple[Node, int, list[Any]]] = [(node, rank, holder)]  # where each tree goes
        chains, uchain = self.c.g.chains, self.c.tab.uchain
        while todo:
            top, rk, out = todo.pop()
            _, edge, tails, ranks = self._known(top, rk)
            bottom, bottom_rank = tails[0], ranks[0]
            _, b_edge, b_tails, b_ranks = self._known(bottom, bottom_rank)
            top_node, low = open_chain(chains[uchain[edge[1]]], [])
            out.append(top_node)
            if b_edge[0] == "l":
                low.append(words[int(self.start_of[bottom[1]])])
            else:  # right first: the stack takes the left child up first
                todo.append((b_tails[1], b_ranks[1], low))
                todo.append((b_tails[0], b_ranks[0], low))
        return holder[0]

    def shape(self, node: Node, rank: int) -> int:
        """What the tree of a TOP node's rank-th derivation is made of, as a number, without
        building it: two derivations of one node get the same number exactly when every node
        of theirs has the same unary chain and split point (:meth:`build` reads nothing else,
        so they build the same tree; a refined grammar's derivations that differ only in
        sub-symbols do). Each (node, rank) is numbered once, from its chain, split point and
        its children's numbers, so a derivation costs only the parts no earlier one had."""
        memo, ids = self.shape_of, self.shape_ids
        uchain = self.c.tab.uchain
        stack: list[tuple[Node, int]] = [(node, rank)]
        while stack:
            top, rk = stack[-1]
            if (top, rk) in memo:
                stack.pop()
                continue
            _, edge, tails, ranks = self._known(top, rk)
            _, b_edge, b_tails, b_ranks = self._known(tails[0], ranks[0])
            if b_edge[0] == "l":
                key: tuple[int, ...] = (int(uchain[edge[1]]), -1)
            else:
                left, right = (b_tails[0], b_ranks[0]), (b_tails[1], b_ranks[1])
                missing = [x for x in (left, right) if x not in memo]
                if missing:
                    stack.extend(missing)
                    continue
                key = (int(uchain[edge[1]]), int(b_edge[2]), memo[left], memo[right])
            memo[(top, rk)] = ids.setdefault(key, len(ids))
            stack.pop()
        return memo[(node, rank)]


def tree_key(tree: Tree | str) -> str:
    """A tree as one bracketed string (for telling trees apart), without recursion."""
    parts: list[str] = []
    todo: list[Tree | str] = [tree]
    while todo:
        item = todo.pop()
        if isinstance(item, str):
            parts.append(item)
            continue
        parts.append("(" + item.label())
        todo.append(")")
        for child in reversed(item):
            todo.append(child)
            todo.append(" ")
    return "".join(parts)
