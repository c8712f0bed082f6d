"""Feature annotations applied while binarizing (selected splits of Klein and Manning 2003).

What it computes: :func:`annotators_for` maps feature names to functions that look at one node
of a cleaned tree (and its ancestors' labels) and return a short suffix that splits the node's
symbol. Each suffix is removed again by :func:`parser.binarize.base_label`.

Complexity: each annotator is O(size of the node's children). Limits: English Penn tags.
"""

from __future__ import annotations

from collections.abc import Sequence

from nltk import Tree

from parser.binarize import FUNCTIONS_ATTR, Annotator, is_preterminal
from parser.errors import GrammarError

_VERB_TAGS = ("MD", "TO", "VBD", "VBZ", "VBP", "VB", "VBN", "VBG")


def _vp_head(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
    """SPLIT-VP (Klein and Manning 2003): a VP marked with its first verbal child tag,
    collapsed to finite / infinitive / participle / to / modal."""
    if node.label() != "VP":
        return ""
    for child in node:
        if isinstance(child, Tree) and len(child) == 1 and isinstance(child[0], str):
            tag = str(child.label())
            if tag in ("VBD", "VBZ", "VBP"):
                return "fin"
            if tag in _VERB_TAGS:
                return tag.lower()
    return ""


def _unary_internal(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
    """UNARY-INTERNAL (Klein and Manning 2003): a phrasal node with a single child."""
    if len(node) == 1 and not isinstance(node[0], str):
        return "u"
    return ""


def _dominates_verb(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
    """DOMINATES-V (Klein and Manning 2003): a phrasal node with a verb somewhere below."""
    if len(node) == 1 and isinstance(node[0], str):
        return ""
    if node.label() in ("S", "SBAR", "SQ", "SINV", "VP"):
        return ""
    tags = {t for _, t in node.pos()}
    return "v" if tags & set(_VERB_TAGS) else ""


def _only_child_tag(tag: str) -> Annotator:
    """UNARY-DT / UNARY-RB (Klein and Manning 2003): the tag ``tag`` as its parent's only
    child (a demonstrative standing alone, an adverb making a phrase by itself)."""

    def annotate(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
        if node.label() == tag and is_preterminal(node) and len(parent) == 1:
            return "u"
        return ""

    return annotate


def _tag_grandparent(tags: frozenset[str]) -> Annotator:
    """SPLIT-IN (Klein and Manning 2003, simplified: our own rule) and its kin: a POS tag of
    ``tags`` marked with its grandparent's label, so that with the parent annotation of tags a
    preposition heading a PP under NP and one under VP differ."""

    def annotate(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
        if node.label() in tags and is_preterminal(node) and len(ancestors) > 1:
            return ancestors[1]
        return ""

    return annotate


_BE = frozenset({"be", "is", "are", "was", "were", "am", "been", "being", "'s", "'re", "'m"})
_HAVE = frozenset({"have", "has", "had", "having", "'ve", "'d"})


def _split_aux(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
    """SPLIT-AUX (Klein and Manning 2003): verb tags of the forms of "be" and "have"."""
    if not is_preterminal(node) or not node.label().startswith("VB"):
        return ""
    word = node[0].lower()
    if word in _BE:
        return "be"
    if word in _HAVE:
        return "have"
    return ""


def _split_cc(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
    """SPLIT-CC (Klein and Manning 2003): "but" and "&" apart from the other conjunctions."""
    if node.label() == "CC" and is_preterminal(node):
        word = node[0].lower()
        if word == "but":
            return "but"
        if word == "&":
            return "amp"
    return ""


def _split_percent(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
    """SPLIT-% (Klein and Manning 2003): the percent sign apart from other nouns."""
    if is_preterminal(node) and node[0] == "%":
        return "pct"
    return ""


def _temporal_np(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
    """TMP-NP (Klein and Manning 2003): an NP that carried the function tag TMP (kept by
    :func:`parser.binarize.clean_tree` when this feature is on)."""
    if node.label() == "NP" and "TMP" in getattr(node, FUNCTIONS_ATTR, ()):
        return "tmp"
    return ""


def _np_ending_in(last: str, mark: str) -> Annotator:
    """An NP of two or more children whose last child is labelled ``last``: POSS-NP (last
    child POS, a possessive) and RIGHT-REC-NP (last child NP) of Klein and Manning 2003."""

    def annotate(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
        if (
            node.label() == "NP"
            and len(node) > 1
            and isinstance(node[-1], Tree)
            and node[-1].label() == last
        ):
            return mark
        return ""

    return annotate


def _base_np(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
    """BASE-NP (after Klein and Manning 2003; our rule): an NP all of whose children are
    POS tags."""
    if (
        node.label() == "NP"
        and not is_preterminal(node)
        and all(isinstance(c, Tree) and is_preterminal(c) for c in node)
    ):
        return "b"
    return ""


def _function_tags(categories: frozenset[str] | None) -> Annotator:
    """A phrase of one of ``categories`` (None: any) marked with the function tags it carried
    in the training tree (e.g. PP-LOC, SBAR-ADV): our own generalization of TMP-NP."""

    def annotate(node: Tree, ancestors: Sequence[str], parent: Tree) -> str:
        if categories is not None and node.label() not in categories:
            return ""
        marks = getattr(node, FUNCTIONS_ATTR, ())
        return "-".join(sorted(m.lower() for m in marks))

    return annotate


#: Function tags that :func:`parser.binarize.clean_tree` must keep for a feature ("*": all).
FUNCTIONS_NEEDED: dict[str, tuple[str, ...]] = {
    "tmp-np": ("TMP",),
    "function-tags": ("*",),
    "pp-functions": ("*",),
    "clause-functions": ("*",),
    "adverbial-functions": ("*",),
}

ANNOTATORS: dict[str, Annotator] = {
    "split-vp": _vp_head,
    "unary-internal": _unary_internal,
    "dominates-verb": _dominates_verb,
    "unary-dt": _only_child_tag("DT"),
    "unary-rb": _only_child_tag("RB"),
    "in-grandparent": _tag_grandparent(frozenset({"IN"})),
    "split-aux": _split_aux,
    "split-cc": _split_cc,
    "split-percent": _split_percent,
    "tmp-np": _temporal_np,
    "possessive-np": _np_ending_in("POS", "poss"),
    "base-np": _base_np,
    "right-rec-np": _np_ending_in("NP", "r"),
    "function-tags": _function_tags(None),
    "pp-functions": _function_tags(frozenset({"PP"})),
    "clause-functions": _function_tags(frozenset({"S", "SBAR"})),
    "adverbial-functions": _function_tags(frozenset({"PP", "ADVP", "SBAR", "S"})),
}


def functions_kept(names: Sequence[str]) -> tuple[str, ...]:
    """The function tags the features ``names`` need kept while cleaning training trees."""
    return tuple(sorted({f for name in names for f in FUNCTIONS_NEEDED.get(name, ())}))


def annotators_for(names: Sequence[str]) -> list[Annotator]:
    """The annotators called ``names``, in that order; GrammarError for an unknown name."""
    out = []
    for name in names:
        if name not in ANNOTATORS:
            raise GrammarError(f"unknown annotation {name!r}; known: {sorted(ANNOTATORS)}")
        out.append(ANNOTATORS[name])
    return out
