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
      they are; the grammar collapses them later.
    * :func:`unbinarize` splices intermediate nodes back into their parents and removes every
      annotation, giving back the cleaned tree exactly.

Label syntax (reserved characters, so user labels may not contain them):
    ``NP^S``            NP whose parent is S (``^`` separates ancestors, nearest first)
    ``IN~sub``          a feature split (``~`` starts a Treewright annotation suffix)
    ``@NP^S|DT,JJ``     intermediate node inside NP^S after the siblings DT, JJ

Complexity: linear in the size of the tree. Limits: recursion depth is the tree depth.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from nltk import Tree

from parser.errors import GrammarError
from parser.trees import drop_empty_elements, strip_function_tags

INTERMEDIATE = "@"
ANCESTOR = "^"
FEATURE = "~"
SIBLINGS = "|"
_RESERVED = (ANCESTOR, FEATURE, SIBLINGS)

#: A feature annotator: given a node of the cleaned tree and the chain of its ancestors'
#: base labels (nearest first), return a suffix to append (without the ``~``) or "".
Annotator = Callable[[Tree, Sequence[str]], str]


def is_preterminal(node: Tree) -> bool:
    """True for a node whose only child is a word."""
    return len(node) == 1 and isinstance(node[0], str)


def clean_tree(tree: Tree) -> Tree:
    """Return a copy with function tags stripped and empty elements removed.

    Raises GrammarError when nothing is left (a tree made only of empty elements).
    """
    cleaned = drop_empty_elements(strip_function_tags(tree))
    if cleaned is None:
        raise GrammarError(f"tree has no words after removing empty elements: {tree}")
    return cleaned


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
            f"(a leading {INTERMEDIATE!r}, or any of {''.join(_RESERVED)!r})")


def binarize(tree: Tree, horizontal: int | None = 1, vertical: int = 2,
             tag_ancestors: int = 0, annotators: Sequence[Annotator] = ()) -> Tree:
    """Markovize and binarize a cleaned tree (see the module docstring).

    ``horizontal`` None keeps all previous siblings (no horizontal markovization);
    ``vertical`` 1 means no parent annotation, 2 the parent, 3 parent and grandparent;
    ``tag_ancestors`` annotates POS tags with that many ancestors (0: none);
    ``annotators`` add feature suffixes (see :data:`Annotator`).
    The root keeps its label unannotated (no ancestors, no features).
    """
    if horizontal is not None and horizontal < 0:
        raise GrammarError(f"horizontal markovization must be >= 0, got {horizontal}")
    if vertical < 1:
        raise GrammarError(f"vertical markovization must be >= 1, got {vertical}")
    return _binarize(tree, (), horizontal, vertical, tag_ancestors, tuple(annotators))


def _annotated(node: Tree, ancestors: tuple[str, ...], vertical: int, tag_ancestors: int,
               annotators: tuple[Annotator, ...]) -> str:
    label = node.label()
    check_label(label)
    depth = tag_ancestors + 1 if is_preterminal(node) else vertical
    up = ancestors[: depth - 1]
    out = label + "".join(ANCESTOR + a for a in up)
    for annotate in annotators if ancestors else ():
        suffix = annotate(node, ancestors)
        if suffix:
            out += FEATURE + suffix
    return out


def _binarize(node: Tree, ancestors: tuple[str, ...], horizontal: int | None, vertical: int,
              tag_ancestors: int, annotators: tuple[Annotator, ...]) -> Tree:
    label = _annotated(node, ancestors, vertical, tag_ancestors, annotators)
    if is_preterminal(node):
        return Tree(label, [node[0]])
    below = (node.label(),) + ancestors
    kids = []
    for child in node:
        if isinstance(child, str):
            raise GrammarError(f"word {child!r} outside a preterminal under {node.label()!r}")
        kids.append(_binarize(child, below, horizontal, vertical, tag_ancestors, annotators))
    if len(kids) <= 2:
        return Tree(label, kids)
    names = [child.label() for child in node]
    # Right-factored chain: X -> c0 @X|c0 ; @X|c0 -> c1 @X|c0,c1 ; ... ; @X|.. -> c_{m-2} c_{m-1}
    tail = kids[-1]
    for pos in range(len(kids) - 2, 0, -1):
        seen = names[:pos]
        if horizontal is not None:
            seen = seen[max(0, len(seen) - horizontal):] if horizontal else []
        inter = INTERMEDIATE + label + SIBLINGS + ",".join(seen)
        tail = Tree(inter, [kids[pos], tail])
    return Tree(label, [kids[0], tail])


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
