"""Feature annotations applied while binarizing (selected splits of Klein and Manning 2003).

What it computes: :func:`annotators_for` maps feature names to functions that look at one node
of a cleaned tree (and its ancestors' labels) and return a short suffix that splits the node's
symbol. Each suffix is removed again by :func:`parser.binarize.base_label`.

Complexity: each annotator is O(size of the node's children). Limits: English Penn tags.
"""

from __future__ import annotations

from collections.abc import Sequence

from nltk import Tree

from parser.binarize import Annotator
from parser.errors import GrammarError

_VERB_TAGS = ("MD", "TO", "VBD", "VBZ", "VBP", "VB", "VBN", "VBG")


def _vp_head(node: Tree, ancestors: Sequence[str]) -> str:
    """SPLIT-VP (Klein and Manning 2003): a VP marked with its first verbal child tag,
    collapsed to finite / infinitive / participle / to / modal."""
    if node.label() != "VP":
        return ""
    for child in node:
        if isinstance(child, Tree) and len(child) == 1 and isinstance(child[0], str):
            tag = child.label()
            if tag in ("VBD", "VBZ", "VBP"):
                return "fin"
            if tag in _VERB_TAGS:
                return tag.lower()
    return ""


def _unary_internal(node: Tree, ancestors: Sequence[str]) -> str:
    """UNARY-INTERNAL (Klein and Manning 2003): a phrasal node with a single child."""
    if len(node) == 1 and not isinstance(node[0], str):
        return "u"
    return ""


def _dominates_verb(node: Tree, ancestors: Sequence[str]) -> str:
    """DOMINATES-V (Klein and Manning 2003): a phrasal node with a verb somewhere below."""
    if len(node) == 1 and isinstance(node[0], str):
        return ""
    if node.label() in ("S", "SBAR", "SQ", "SINV", "VP"):
        return ""
    tags = {t for _, t in node.pos()}
    return "v" if tags & set(_VERB_TAGS) else ""


ANNOTATORS: dict[str, Annotator] = {
    "split-vp": _vp_head,
    "unary-internal": _unary_internal,
    "dominates-verb": _dominates_verb,
}


def annotators_for(names: Sequence[str]) -> list[Annotator]:
    """The annotators called ``names``, in that order; GrammarError for an unknown name."""
    out = []
    for name in names:
        if name not in ANNOTATORS:
            raise GrammarError(f"unknown annotation {name!r}; known: {sorted(ANNOTATORS)}")
        out.append(ANNOTATORS[name])
    return out
