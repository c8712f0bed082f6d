"""Tree transforms for grammar training: cleaning, markovized binarization, and its exact undo.

What it computes
    * :func:`clean_tree` strips function tags and indices (``NP-SBJ-1`` -> ``NP``; labels that
      start with ``-`` such as ``-LRB-`` stay whole), drops empty elements (``-NONE-``) and the
      constituents they leave empty.
    * :func:`binarize` rewrites a cleaned tree so that every node has one or two children:
      vertical markovization annotates each phrasal label with its ``vertical - 1`` nearest
      ancestors (parent annotation, Johnson 1998); horizontal markovization replaces a node with
      three or more children by a right-branching chain of intermediate nodes that remember only
      the ``horizontal`` previous siblings (Klein and Manning 2003). Unary chains are kept as
      they are; the grammar collapses them later. With ``rare`` (see :func:`rare_labels`),
      labels too rare in the training set fall back one order (variable-order markovization).
    * :func:`unbinarize` splices intermediate nodes back into their parents and removes every
      annotation, giving back the cleaned tree exactly.

Label syntax (reserved characters, so user labels may not contain them):
    ``NP^S``            NP whose parent is S (``^`` separates ancestors, nearest first)
    ``IN~sub``          a feature split (``~`` starts a Treewright annotation suffix)
    ``@NP^S|DT,JJ``     intermediate node inside NP^S after the siblings DT, JJ

Complexity: linear in the size of the tree. Limits: recursion depth is the tree depth.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Callable, Collection, Iterable, Sequence
from typing import NamedTuple

from nltk import Tree

from parser.errors import GrammarError
from parser.trees import drop_empty_elements, strip_label

INTERMEDIATE = "@"
ANCESTOR = "^"
FEATURE = "~"
SIBLINGS = "|"
_RESERVED = (ANCESTOR, FEATURE, SIBLINGS)

#: A feature annotator: given a node of the cleaned tree, the chain of its ancestors' base
#: labels (nearest first) and its parent node, return a suffix to append (without the ``~``)
#: or "".
Annotator = Callable[[Tree, Sequence[str], Tree], str]

#: Attribute :func:`clean_tree` sets on a node that carried one of the kept function tags.
FUNCTIONS_ATTR = "tw_functions"


def is_preterminal(node: Tree) -> bool:
    """True for a node whose only child is a word."""
    return len(node) == 1 and isinstance(node[0], str)


def clean_tree(tree: Tree, keep_functions: Collection[str] = ()) -> Tree:
    """Return a copy with function tags stripped and empty elements removed.

    ``keep_functions``: function tags (e.g. ``TMP``; ``*`` for all) remembered on the node that
    carried them, as a frozenset in the attribute :data:`FUNCTIONS_ATTR` (labels are stripped
    all the same), for annotators that split on them. Indices (``NP-SBJ-1``) are not tags.
    Raises GrammarError when nothing is left (a tree made only of empty elements).
    """
    # Empty elements first: their tag (-NONE-) is the same before and after stripping.
    dropped = drop_empty_elements(tree)
    if dropped is None:
        raise GrammarError(f"tree has no words after removing empty elements: {tree}")
    return _strip_keeping(dropped, frozenset(keep_functions))


def _strip_keeping(node: Tree, keep: frozenset[str]) -> Tree:
    """:func:`parser.trees.strip_function_tags`, remembering the tags of ``keep``."""
    label = node.label()
    out = Tree(
        strip_label(label), [_strip_keeping(c, keep) if isinstance(c, Tree) else c for c in node]
    )
    if keep and label and label[0] != "-":
        parts = {p for p in re.split(r"[-=]", label)[1:] if p.isalpha()}
        marks = parts if "*" in keep else keep.intersection(parts)
        if marks:
            setattr(out, FUNCTIONS_ATTR, frozenset(marks))
    return out


def base_label(label: str) -> str:
    """The user's label inside an annotated one (``NP^S~x`` -> ``NP``)."""
    cut = len(label)
    for ch in (ANCESTOR, FEATURE):
        pos = label.find(ch)
        if 0 <= pos < cut:
            cut = pos
    return label[:cut]


def is_intermediate(label: str) -> bool:
    """True for the labels of nodes introduced by horizontal markovization."""
    return label.startswith(INTERMEDIATE)


def check_label(label: str) -> None:
    """Raise GrammarError for a label that collides with the annotation syntax."""
    if not label:
        raise GrammarError("empty label in a training tree")
    if label.startswith(INTERMEDIATE) or any(ch in label for ch in _RESERVED):
        raise GrammarError(
            f"label {label!r} uses a character reserved for annotations "
            f"(a leading {INTERMEDIATE!r}, or any of {''.join(_RESERVED)!r})"
        )


def binarize(
    tree: Tree,
    horizontal: int | None = 1,
    vertical: int = 2,
    tag_ancestors: int = 0,
    annotators: Sequence[Annotator] = (),
    head_outward: bool = False,
    plain_intermediates: bool = False,
    rare: Callable[[str], bool] | None = None,
) -> Tree:
    """Markovize and binarize a cleaned tree (see the module docstring).

    ``horizontal`` None keeps all previous siblings (no horizontal markovization);
    ``vertical`` 1 means no parent annotation, 2 the parent, 3 parent and grandparent;
    ``tag_ancestors`` annotates POS tags with that many ancestors (0: none);
    ``annotators`` add feature suffixes (see :data:`Annotator`);
    ``head_outward``: factor each node outward from its head child (:func:`head_index`):
    the head first takes its right siblings, nearest first, then its left siblings, and each
    intermediate node remembers the head's label and the ``horizontal`` siblings attached last
    (``@NP^S|NN:JJ``); otherwise a right-factored chain from the first child;
    ``plain_intermediates``: intermediate nodes name their parent's plain label (``@NP|DT``)
    rather than its annotated one (``@NP^S~b|DT``), so that the phrases of one label share
    their intermediate statistics whatever their context (only the first child and the
    phrase's own unary and binary rules see the annotations);
    ``rare``: variable-order markovization (the variable-history models of Klein and Manning
    2003; from memory): a label for which ``rare(label)`` is true is replaced by the label one
    order lower (an intermediate node remembering one sibling fewer, a phrase or tag without its
    ancestors; features stay).
    :func:`rare_labels` finds the rare labels of a training set.
    The root keeps its label unannotated (no ancestors, no features).
    """
    if horizontal is not None and horizontal < 0:
        raise GrammarError(f"horizontal markovization must be >= 0, got {horizontal}")
    if vertical < 1:
        raise GrammarError(f"vertical markovization must be >= 1, got {vertical}")
    settings = _Settings(
        horizontal,
        vertical,
        tag_ancestors,
        tuple(annotators),
        head_outward,
        plain_intermediates,
        rare,
    )
    return _binarize(tree, (), None, settings)


class _Settings(NamedTuple):
    horizontal: int | None
    vertical: int
    tag_ancestors: int
    annotators: tuple[Annotator, ...]
    head_outward: bool
    plain: bool
    rare: Callable[[str], bool] | None


def rare_labels(trees: Iterable[Tree], min_count: int) -> Callable[[str], bool]:
    """For :func:`binarize`'s ``rare``: true for the labels that occur fewer than
    ``min_count`` times in ``trees`` (binarized at the full orders)."""
    counts: Counter[str] = Counter(node.label() for tree in trees for node in tree.subtrees())
    return lambda label: counts[label] < min_count


def _annotated(node: Tree, ancestors: tuple[str, ...], parent: Tree | None, st: _Settings) -> str:
    label = str(node.label())
    check_label(label)
    depth = st.tag_ancestors + 1 if is_preterminal(node) else st.vertical
    annotators = st.annotators if parent is not None else ()
    features = "".join(
        FEATURE + suffix for annotate in annotators if (suffix := annotate(node, ancestors, parent))
    )
    full = label + "".join(ANCESTOR + a for a in ancestors[: depth - 1]) + features
    if st.rare is not None and depth > 1 and st.rare(full):
        return label + features
    return full


def _binarize(node: Tree, ancestors: tuple[str, ...], parent: Tree | None, st: _Settings) -> Tree:
    label = _annotated(node, ancestors, parent, st)
    if is_preterminal(node):
        return Tree(label, [node[0]])
    below = (node.label(),) + ancestors
    kids = []
    for child in node:
        if isinstance(child, str):
            raise GrammarError(f"word {child!r} outside a preterminal under {node.label()!r}")
        kids.append(_binarize(child, below, node, st))
    if len(kids) <= 2:
        return Tree(label, kids)
    names = [child.label() for child in node]
    inner_name = node.label() if st.plain else label
    if st.head_outward:
        return _head_outward(label, inner_name, kids, names, head_index(node), st)
    # Right-factored chain: X -> c0 @X|c0 ; @X|c0 -> c1 @X|c0,c1 ; ... ; @X|.. -> c_{m-2} c_{m-1}
    tail = kids[-1]
    for pos in range(len(kids) - 2, 0, -1):
        inter = _intermediate(INTERMEDIATE + inner_name + SIBLINGS, names[:pos], st)
        tail = Tree(inter, [kids[pos], tail])
    return Tree(label, [kids[0], tail])


def _intermediate(prefix: str, seen: list[str], st: _Settings) -> str:
    """An intermediate node's label: ``prefix`` and the siblings it remembers (the last
    ``horizontal`` of ``seen``, or one fewer when that label is rare)."""
    window = _window(seen, st.horizontal)
    full = prefix + ",".join(window)
    if st.rare is not None and window and st.rare(full):
        return prefix + ",".join(window[1:])
    return full


def _window(seen: list[str], horizontal: int | None) -> list[str]:
    """The siblings an intermediate node remembers: the last ``horizontal`` (None: all)."""
    if horizontal is None:
        return seen
    return seen[max(0, len(seen) - horizontal) :] if horizontal else []


def _head_outward(
    label: str, inner_name: str, kids: list[Tree], names: list[str], head: int, st: _Settings
) -> Tree:
    order = list(range(head + 1, len(kids))) + list(range(head - 1, -1, -1))
    inner = kids[head]
    added: list[str] = []
    for step, pos in enumerate(order):
        added.append(names[pos])
        if step == len(order) - 1:
            node_label = label
        else:
            node_label = _intermediate(
                INTERMEDIATE + inner_name + SIBLINGS + names[head] + ":", added, st
            )
        pair = [inner, kids[pos]] if pos > head else [kids[pos], inner]
        inner = Tree(node_label, pair)
    return inner


# Head rules: for each phrase label, the search direction and the child labels to look for,
# in priority order (after the head rules of Collins 1999, simplified; from memory). A phrase
# with no rule, or no child found, takes its first child (right-to-left search: its last).
_HEAD_RULES: dict[str, tuple[str, tuple[str, ...]]] = {
    "ADJP": ("left", ("JJ", "JJR", "JJS", "ADJP", "VBN", "VBG", "QP", "NNS", "NN", "CD")),
    "ADVP": ("right", ("RB", "RBR", "RBS", "ADVP", "JJ", "IN", "FW")),
    "CONJP": ("right", ("CC", "RB", "IN")),
    "FRAG": ("right", ()),
    "INTJ": ("left", ("UH",)),
    "NAC": ("left", ("NN", "NNS", "NNP", "NNPS", "NP", "NAC")),
    "NP": (
        "right",
        (
            "NN",
            "NNP",
            "NNPS",
            "NNS",
            "NX",
            "POS",
            "JJR",
            "PRP",
            "CD",
            "NP",
            "QP",
            "JJ",
            "JJS",
            "RB",
            "ADJP",
            "DT",
            "FW",
        ),
    ),
    "NX": ("right", ("NN", "NNS", "NNP", "NNPS", "NX")),
    "PP": ("left", ("IN", "TO", "VBG", "VBN", "RP", "FW", "PP")),
    "PRN": ("left", ()),
    "PRT": ("right", ("RP",)),
    "QP": ("left", ("CD", "$", "NNS", "NN", "JJ", "RB", "DT", "QP")),
    "RRC": ("right", ("VP", "NP", "ADVP", "ADJP", "PP")),
    "S": ("left", ("VP", "S", "SBAR", "ADJP", "UCP", "NP", "TO", "IN")),
    "SBAR": (
        "left",
        ("WHNP", "WHPP", "WHADVP", "WHADJP", "IN", "DT", "S", "SQ", "SINV", "SBAR", "FRAG"),
    ),
    "SBARQ": ("left", ("SQ", "S", "SINV", "SBARQ", "FRAG")),
    "SINV": ("left", ("VBZ", "VBD", "VBP", "VB", "MD", "VP", "S", "SINV", "ADJP", "NP")),
    "SQ": ("left", ("VBZ", "VBD", "VBP", "VB", "MD", "VP", "SQ")),
    "UCP": ("right", ()),
    "VP": (
        "left",
        ("VBD", "VBN", "MD", "VBZ", "VB", "VBG", "VBP", "TO", "VP", "ADJP", "NN", "NNS", "NP"),
    ),
    "WHADJP": ("left", ("WRB", "JJ", "ADJP")),
    "WHADVP": ("right", ("WRB",)),
    "WHNP": ("left", ("WDT", "WP", "WP$", "WHADJP", "WHPP", "WHNP", "NN", "NNS", "NNP")),
    "WHPP": ("left", ("IN", "TO", "FW")),
}


def head_index(node: Tree) -> int:
    """Index of the head child of a phrasal node of a cleaned tree (see _HEAD_RULES)."""
    direction, wanted = _HEAD_RULES.get(node.label(), ("left", ()))
    names = [c.label() if isinstance(c, Tree) else "" for c in node]
    positions = range(len(names)) if direction == "left" else range(len(names) - 1, -1, -1)
    for want in wanted:
        for i in positions:
            if names[i] == want:
                return i
    return 0 if direction == "left" else len(names) - 1


def unbinarize(tree: Tree) -> Tree:
    """Undo :func:`binarize`: splice intermediate nodes, strip every annotation."""
    return _unbinarize(tree)


def _unbinarize(node: Tree) -> Tree:
    if is_preterminal(node):
        return Tree(base_label(node.label()), [node[0]])
    kids: list[Tree] = []
    _collect(node, kids)
    return Tree(base_label(node.label()), kids)


def _collect(node: Tree, out: list[Tree]) -> None:
    for child in node:
        if isinstance(child, str):
            raise GrammarError(f"word {child!r} outside a preterminal under {node.label()!r}")
        if is_intermediate(child.label()):
            _collect(child, out)
        else:
            out.append(_unbinarize(child))
