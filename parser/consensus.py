"""The consensus tree: the bracketing that maximizes expected labelled recall minus a cost.

What it computes
    Given the span posteriors of a sentence (P(label spans i..k | words), from inside-outside,
    :mod:`parser.chart`), :func:`consensus_tree` finds the tree T maximizing

        sum over labelled spans (l, i, k) of T of  (P(l, i, k | words) - cost)

    over all trees whose brackets nest. This is the labelled-recall decoder of Goodman 1996
    ("Parsing algorithms and metrics", ACL) with a per-bracket cost added, our own choice so
    that precision counts too: a bracket is worth proposing when its posterior exceeds
    ``cost``. The search is CKY over unlabelled binary skeletons (a span with no label worth
    proposing stays unbracketed and is flattened away), so it is exact.

    Unlike the Viterbi tree, the consensus tree sums over every derivation and every
    annotation of the grammar (``NP^S`` and ``NP^VP`` both count as NP), which is why it scores
    better on labelled bracket F1. It has no probability of its own under the grammar.

    Required spans are always bracketed (with their label, or with their most probable one:
    under a required span the chart gives the span a labelled posterior),
    forbidden spans never are (their posteriors are zero under the constraints), and the POS
    tags are the caller's (the Viterbi tree's, which honour fixed tags).

Complexity: O(n^3) with an O(n) vectorized inner step, plus the posterior list.
Limits: the cost is a single number for all labels.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np
from nltk import Tree

from parser.trees import tree_from_spans

#: Per-bracket cost (measured on the GUM split by bench/accuracy_options.py; see DEVELOPERS.md).
DEFAULT_COST = 0.4


def consensus_tree(
    words: Sequence[str],
    tags: Sequence[str],
    posteriors: Sequence[tuple[str, int, int, float]],
    root: str,
    required: Iterable[tuple[int, int, str | None]] = (),
    cost: float = DEFAULT_COST,
    prefer: Iterable[tuple[str, int, int]] = (),
    bonus: float = 0.0,
) -> Tree:
    """The tree of :mod:`parser.consensus` (see there) over ``words`` with ``tags``.

    ``posteriors``: ``(label, start, end, p)``, spans 0-based and end-exclusive; labels equal to
    ``root`` on the whole sentence are the root itself. ``required``: spans that must be
    bracketed, ``(start, end, label or None)``. ``prefer``: labelled spans ``(label, start,
    end)`` (e.g. the brackets of the tree being re-parsed) whose posterior counts ``bonus``
    more, so they stay unless the evidence against them is clear.
    """
    n = len(words)
    gain = np.zeros((n + 1, n + 1))
    labels: dict[tuple[int, int], list[tuple[float, str]]] = {}
    # Most probable label of every span, for required spans given without a label.
    best_label: dict[tuple[int, int], tuple[float, str]] = {}
    preferred = set(prefer) if bonus else set()
    for label, i, k, p in posteriors:
        if (i, k) == (0, n) and label == root:
            continue
        worth = p + bonus if (label, i, k) in preferred else p
        if worth > cost:
            gain[i, k] += worth - cost
            labels.setdefault((i, k), []).append((p, label))
        if (i, k) not in best_label or p > best_label[(i, k)][0]:
            best_label[(i, k)] = (p, label)
    forced: dict[tuple[int, int], str | None] = {}
    for i, k, req_label in required:
        if (i, k) == (0, n) and req_label in (None, root):
            continue
        forced[(i, k)] = req_label
        gain[i, k] += n + 1.0  # more than all unforced gains together: always chosen
    # CKY over binary skeletons: score[i, k] = gain[i, k] + best split.
    score = np.zeros((n + 1, n + 1))
    split = np.zeros((n + 1, n + 1), dtype=np.int64)
    for length in range(2, n + 1):
        for i in range(n - length + 1):
            k = i + length
            vals = score[i, i + 1 : k] + score[i + 1 : k, k]
            x = int(np.argmax(vals))
            split[i, k] = i + 1 + x
            score[i, k] = gain[i, k] + vals[x]
    spans: list[tuple[str, int, int]] = []
    stack = [(0, n)]
    while stack:
        i, k = stack.pop()
        chosen = sorted(labels.get((i, k), ()), reverse=True)
        names = [lab for _, lab in chosen]
        if (i, k) in forced:
            want = forced[(i, k)]
            if want is None and not names:
                names = [best_label[(i, k)][1]] if (i, k) in best_label else []
            elif want is not None and want not in names:
                names.insert(0, want)
        spans.extend((lab, i, k) for lab in names)
        if k - i > 1:
            j = int(split[i, k])
            stack.append((j, k))
            stack.append((i, j))
    return tree_from_spans(list(words), list(tags), spans, root=root)
