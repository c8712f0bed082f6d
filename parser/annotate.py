"""Feature annotations applied while binarizing (selected splits of Klein and Manning 2003).

What it computes: :func:`annotators_for` maps feature names to functions that look at one node
of a cleaned tree (and its ancestors' labels) and return a short suffix that splits the node's
symbol. Each suffix is removed again by :func:`parser.binarize.base_label`.

Complexity: each annotator is O(size of the node's children). Limits: English Penn tags.
"""

from __future__ import annotations

from collections.abc import Sequence

from parser.binarize import Annotator
from parser.errors import GrammarError

ANNOTATORS: dict[str, Annotator] = {}


def annotators_for(names: Sequence[str]) -> list[Annotator]:
    """The annotators called ``names``, in that order; GrammarError for an unknown name."""
    out = []
    for name in names:
        if name not in ANNOTATORS:
            raise GrammarError(f"unknown annotation {name!r}; known: {sorted(ANNOTATORS)}")
        out.append(ANNOTATORS[name])
    return out
