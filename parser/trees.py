"""Bracketed (Penn Treebank style) tree text: reading, writing and small tree operations.

The one tree type is :class:`nltk.Tree`. A leaf is a ``str``; a *preterminal* is
``Tree(tag, [word])``; every other node (a *phrasal* node) has only ``Tree`` children.

Reading (:func:`read_trees`, :func:`read_tree`, :func:`iter_trees`)
    Any number of trees, separated by any whitespace, several per line or one tree over many
    lines. A regular-expression tokenizer does the scanning (a whole preterminal such as
    ``(NN dog)`` is one token), so the Python loop runs once per bracket, not once per
    character: O(n) in the length of the text. Line and column (both 1-based, the column counts
    characters, only ``\\n`` ends a line) are computed only when an error is raised.

    Malformed text raises :class:`parser.errors.BracketSyntaxError` pointing at the start of the
    offending token: a stray ``)``; end of input with a bracket still open (the position is the
    end of the input, the message names where the unclosed tree began); a bracket without a label
    inside a tree ``(S ( (NP ...``; empty brackets ``( )``; a node without children ``(NP )``; a
    bare word beside a subtree ``(NP dog (NN cat))``; a second word in a preterminal
    ``(NN cat dog)``; a word outside any tree.

The outer wrapper ``( (S ...) )``
    is kept, as a node whose label is the empty string, exactly as NLTK's ``Tree.fromstring``
    does; :func:`write_tree` writes it back as ``( (S ...))``. An empty label is accepted only on
    the outermost node. (Scoring ignores such a wrapper by default.)

Bracket words
    A word ``(`` or ``)`` cannot stand in bracketed text; the writer spells it ``-LRB-`` /
    ``-RRB-`` (also inside a word: ``f(x)`` is written ``f-LRB-x-RRB-``) and the reader leaves
    ``-LRB-`` and friends as they are: they are the canonical stored form. So
    ``read(write(t)) == t`` for every tree whose words are in stored form (every tree that came
    from the reader), and ``write(read(write(t))) == write(t)`` for every writable tree.
    ``[ ] { }`` are legal in bracketed text and the writer keeps them as they are by default
    (the GUM corpus stores ``[`` raw under the tag ``-LRB-``, and an export must not change the
    annotators' words); ``all_brackets=True`` writes them as ``-LSB- -RSB- -LCB- -RCB-``.

Writing (:func:`write_tree`, :func:`write_trees`)
    One line, or indented: a node that fits in ``width`` columns stays on one line, otherwise
    each child goes on its own line two spaces deeper (the layout of NLTK's ``Tree.pformat``,
    which is also the layout of the GUM files, so those are reproduced byte for byte). The writer
    refuses (:class:`TreeError`) what the reader could not read back: a word or label with
    whitespace, an empty word, a node without children, a word beside a subtree, an empty label
    below the root.

Limits
    The reader is iterative, and it refuses brackets nested more than :data:`MAX_DEPTH` (300)
    levels deep with a :class:`BracketSyntaxError` at the bracket that goes too deep (line and
    column). That is the door every tree of the service comes in by (saves, review, imports),
    and it is what keeps the routines that recurse over a tree (the writer, the transforms,
    scoring, binarization, NLTK's own ``Tree`` methods) far from Python's recursion limit of
    about 1,000 frames. Hand-annotated trees are a few dozen levels deep (common practice, no
    source), so the limit refuses only broken or hostile input.
"""

from __future__ import annotations

import gc
import re
from collections.abc import Iterable, Iterator, Sequence
from itertools import islice
from typing import Any

from nltk import Tree

from parser.errors import BracketSyntaxError, ParserError

MAX_DEPTH = 300  # levels of brackets a tree may nest (see Limits above)

__all__ = [
    "MAX_DEPTH",
    "UNKNOWN_TAG",
    "TreeError",
    "constituents",
    "drop_empty_elements",
    "escape_word",
    "flat_tree",
    "is_preterminal",
    "iter_trees",
    "pos_tags",
    "read_tree",
    "read_trees",
    "strip_function_tags",
    "strip_label",
    "text_lines",
    "tree_from_spans",
    "unescape_word",
    "words",
    "write_tree",
    "write_trees",
]

#: POS tag given by :func:`flat_tree` / :func:`tree_from_spans` when no tag is known. Not a Penn
#: Treebank tag, so it can never be mistaken for a real guess; OntoNotes uses it the same way.
UNKNOWN_TAG = "XX"

#: Labels that mark empty elements (traces, null complementizers) in Penn-style treebanks.
EMPTY_TAGS = frozenset({"-NONE-"})

_ROUND = {"(": "-LRB-", ")": "-RRB-"}
_ALL = {**_ROUND, "[": "-LSB-", "]": "-RSB-", "{": "-LCB-", "}": "-RCB-"}
_UNESCAPE = {v: k for k, v in _ALL.items()}
_ROUND_RE = re.compile(r"[()]")
_ALL_RE = re.compile(r"[()\[\]{}]")
_UNESCAPE_RE = re.compile("|".join(re.escape(k) for k in _UNESCAPE))
_SPACE_RE = re.compile(r"\s")

# Alternatives, in order: a whole preterminal "(TAG word)"; an opening bracket with its label
# (possibly empty); a closing bracket; a bare word. findall yields one 5-tuple per token, and
# exactly one alternative's groups are non-empty, except an open bracket whose label is empty.
_TOKEN_RE = re.compile(
    r"\s*(?:\(\s*([^\s()]+)\s+([^\s()]+)\s*\)"
    r"|\(\s*([^\s()]*)"
    r"|(\))"
    r"|([^\s()]+))"
)


class TreeError(ParserError):
    """A tree (or a set of spans) that breaks the shape rules and cannot be written or built."""


# --------------------------------------------------------------------------------------------
# reading


def text_lines(text: str, keepends: bool = False) -> list[str]:
    """The lines of ``text``, ended by ``\n`` (or ``\r\n``) only.

    Unlike :meth:`str.splitlines`, a form feed, U+2028, U+0085 or a lone ``\r`` inside a line
    does not end it, so line numbers agree with every editor that counts newlines (and with
    the reader's error positions). A final newline does not start an empty last line.
    With ``keepends`` each line keeps its ending."""
    pieces = text.split("\n")
    last = pieces.pop() if pieces else ""
    out = [p + "\n" if keepends else p.removesuffix("\r") for p in pieces]
    if last:
        out.append(last if keepends else last.removesuffix("\r"))
    return out


def _line_col(text: str, offset: int, line_offset: int) -> tuple[int, int]:
    line = text.count("\n", 0, offset) + 1 + line_offset
    column = offset - (text.rfind("\n", 0, offset) + 1) + 1
    return line, column


def _token_offset(text: str, index: int) -> int:
    match = next(islice(_TOKEN_RE.finditer(text), index, None), None)
    if match is None:
        return len(text)
    # the token proper, not the blank the pattern swallows before it
    return match.start() + len(match.group()) - len(match.group().lstrip())


def _parse(text: str, source: str | None, line_offset: int = 0, single: bool = False) -> list[Tree]:
    """Parse every tree in ``text``; ``line_offset`` lines come before it (for messages).

    With ``single``, anything after the first tree is an error.
    """
    # Building ~100k small containers triggers the cyclic collector over and over although
    # nothing here can form a cycle; pausing it halves the reading time.
    paused = gc.isenabled()
    gc.disable()
    try:
        return _parse_tokens(text, source, line_offset, single)
    finally:
        if paused:
            gc.enable()


def _parse_tokens(text: str, source: str | None, line_offset: int, single: bool) -> list[Tree]:
    tokens = _TOKEN_RE.findall(text)
    trees: list[Tree] = []
    # one entry per open bracket: [label, children, token index of the "(",
    #                              token index of the bare word among the children or -1]
    stack: list[list[Any]] = []
    # Tree.__init__ only stores the label and the children, with type checks that cannot fail
    # here; doing it directly makes reading about twice as fast.
    new = Tree.__new__
    fill = list.extend

    def fail(index: int, message: str, expected: str) -> BracketSyntaxError:
        line, column = _line_col(text, _token_offset(text, index), line_offset)
        return BracketSyntaxError(message, line, column, expected=expected, source=source)

    for i, (tag, word, label, close, bare) in enumerate(tokens):
        if len(stack) >= MAX_DEPTH and not close and not bare:
            raise fail(
                i,
                f"brackets nested more than {MAX_DEPTH} levels deep; the deepest "
                "tree accepted has that many levels",
                "')'",
            )
        if single and trees and not stack and not close:
            raise fail(i, "text after the tree: only one tree was wanted", "end of input")
        if tag:
            node = new(Tree)
            node.append(word)
            node._label = tag
        elif close:
            if not stack:
                raise fail(i, "unbalanced ')': no bracket is open here", "'(' or end of input")
            label, children, _, _ = stack.pop()
            if not children:
                if label:
                    raise fail(i, f"the node {label!r} has no children", "a word or '('")
                raise fail(i, "empty brackets '( )'", "a label")
            node = new(Tree)
            fill(node, children)
            node._label = label
        elif bare:
            if not stack:
                raise fail(i, f"text outside any tree: {bare!r}", "'('")
            top = stack[-1]
            children = top[1]
            if children:
                if isinstance(children[0], str):
                    raise fail(
                        i,
                        f"the preterminal {top[0]!r} already holds the word "
                        f"{children[0]!r}; a preterminal holds one word",
                        "')'",
                    )
                raise fail(
                    i,
                    f"the word {bare!r} stands beside a subtree; a word must sit "
                    f"alone in its POS bracket, e.g. (TAG {bare})",
                    "'('",
                )
            top[3] = i
            children.append(bare)
            continue
        else:
            if stack and not label:
                raise fail(
                    i,
                    "a bracket without a label inside a tree "
                    "(only the outermost bracket may lack one)",
                    "a label",
                )
            stack.append([label, [], i, -1])
            continue
        # a finished node (preterminal token or closed bracket) goes to its parent
        if stack:
            top = stack[-1]
            if top[3] >= 0:
                bare = top[1][0]
                raise fail(
                    top[3],
                    f"the word {bare!r} stands beside a subtree; a word must "
                    f"sit alone in its POS bracket, e.g. (TAG {bare})",
                    "'('",
                )
            top[1].append(node)
        else:
            trees.append(node)

    if stack:
        line, column = _line_col(text, _token_offset(text, stack[0][2]), line_offset)
        end_line, end_column = _line_col(text, len(text), line_offset)
        raise BracketSyntaxError(
            f"end of input with {len(stack)} bracket(s) still open; the unclosed tree begins "
            f"at line {line}, column {column}",
            end_line,
            end_column,
            expected="')'",
            source=source,
        )
    return trees


def read_trees(text: str, source: str | None = None) -> list[Tree]:
    """All trees in ``text`` (possibly none), in order.

    ``source`` (a file name, say) is put in error messages. Raises
    :class:`~parser.errors.BracketSyntaxError` on malformed text.
    """
    return _parse(text, source)


def read_tree(text: str, source: str | None = None) -> Tree:
    """Exactly one tree; zero trees or a second tree is a :class:`BracketSyntaxError`."""
    trees = _parse(text, source, single=True)
    if not trees:
        line, column = _line_col(text, len(text), 0)
        raise BracketSyntaxError("no tree in the text", line, column, expected="'('", source=source)
    return trees[0]


def iter_trees(lines: Iterable[str], source: str | None = None) -> Iterator[Tree]:
    """Yield trees one by one from an iterable of lines (an open text file, say).

    Memory stays proportional to the largest tree, not to the file. Lines are gathered until
    their brackets balance, then parsed together, so errors carry the true line numbers.
    ``source`` defaults to the handle's ``name`` attribute when it has one.
    """
    if source is None:
        name = getattr(lines, "name", None)
        source = name if isinstance(name, str) else None
    buffer: list[str] = []
    start_line = 0  # lines before the buffer
    seen = 0
    balance = 0
    for line in lines:
        seen += 1
        buffer.append(line)
        balance += line.count("(") - line.count(")")
        if balance <= 0:
            chunk = "".join(buffer)
            if chunk.strip():
                yield from _parse(chunk, source, start_line)
            buffer = []
            start_line = seen
            balance = 0
    chunk = "".join(buffer)
    if chunk.strip():
        yield from _parse(chunk, source, start_line)


# --------------------------------------------------------------------------------------------
# writing


def escape_word(word: str, all_brackets: bool = False) -> str:
    """``(`` ``)`` (and with ``all_brackets`` also ``[ ] { }``) as -LRB- -RRB- -LSB- ..."""
    if all_brackets:
        return _ALL_RE.sub(lambda m: _ALL[m.group()], word)
    return _ROUND_RE.sub(lambda m: _ROUND[m.group()], word)


def unescape_word(word: str) -> str:
    """The reverse of :func:`escape_word` with ``all_brackets``: ``-LRB-`` gives ``(``, etc.

    For display only; stored trees keep the escaped form.
    """
    return _UNESCAPE_RE.sub(lambda m: _UNESCAPE[m.group()], word)


def _atom(text: object, what: str, all_brackets: bool) -> str:
    if not isinstance(text, str):
        raise TreeError(f"{what} {text!r} is not a string")
    if not text:
        raise TreeError(f"empty {what}")
    if _SPACE_RE.search(text):
        raise TreeError(f"{what} {text!r} contains whitespace and cannot be written")
    if "(" in text or ")" in text or all_brackets:
        return escape_word(text, all_brackets)
    return text


def _check_children(node: Tree) -> None:
    if len(node) == 0:
        raise TreeError(f"the node {node.label()!r} has no children")
    if len(node) > 1 and any(not isinstance(child, Tree) for child in node):
        raise TreeError(
            f"the node {node.label()!r} mixes words and subtrees (or holds several words)"
        )


def _flat_strings(node: Tree, root: bool, all_brackets: bool, memo: dict[int, str]) -> str:
    """The one-line text of ``node``, remembering every subtree's text in ``memo`` by id."""
    if not isinstance(node, Tree):
        raise TreeError(f"expected a Tree, got {type(node).__name__}")
    _check_children(node)
    label = node.label()
    parts = ["(" if root and label == "" else "(" + _atom(label, "label", all_brackets)]
    for child in node:
        if isinstance(child, Tree):
            parts.append(_flat_strings(child, False, all_brackets, memo))
        else:
            parts.append(_atom(child, "word", all_brackets))
    text = " ".join(parts) + ")"
    memo[id(node)] = text
    return text


def _indented(
    node: Tree,
    indent: int,
    width: int,
    root: bool,
    all_brackets: bool,
    memo: dict[int, str],
    out: list[str],
) -> None:
    text = memo[id(node)]
    if len(text) + indent < width:
        out.append(text)
        return
    label = node.label()
    out.append("(" if root and label == "" else "(" + _atom(label, "label", all_brackets))
    pad = "\n" + " " * (indent + 2)
    for child in node:
        out.append(pad)
        if isinstance(child, Tree):
            _indented(child, indent + 2, width, False, all_brackets, memo, out)
        else:
            out.append(_atom(child, "word", all_brackets))
    out.append(")")


def write_tree(
    tree: Tree, indent: bool = False, *, width: int = 70, all_brackets: bool = False
) -> str:
    """The bracketed text of one tree, without a final newline.

    ``indent=False`` gives one line. ``indent=True`` breaks a node over several lines only when
    its one-line form would reach column ``width``. ``all_brackets`` escapes ``[ ] { }`` too.
    Raises :class:`TreeError` for a tree the reader could not read back.
    """
    memo: dict[int, str] = {}
    text = _flat_strings(tree, True, all_brackets, memo)
    if not indent:
        return text
    out: list[str] = []
    _indented(tree, 0, width, True, all_brackets, memo, out)
    return "".join(out)


def write_trees(
    trees: Iterable[Tree], indent: bool = False, *, width: int = 70, all_brackets: bool = False
) -> str:
    """Several trees: one per line, or (``indent=True``) separated by a blank line.

    The text ends with a newline unless there are no trees (then it is empty).
    """
    sep = "\n\n" if indent else "\n"
    parts = [write_tree(t, indent, width=width, all_brackets=all_brackets) for t in trees]
    return sep.join(parts) + "\n" if parts else ""


# --------------------------------------------------------------------------------------------
# small operations


def is_preterminal(node: object) -> bool:
    """True for ``Tree(tag, [word])``: one child, and that child a string."""
    return isinstance(node, Tree) and len(node) == 1 and isinstance(node[0], str)


def words(tree: Tree) -> list[str]:
    """The leaves, left to right."""
    return [str(leaf) for leaf in tree.leaves()]


def pos_tags(tree: Tree) -> list[str]:
    """The label above each word, left to right (the POS tag for well-formed trees)."""
    return [tag for _, tag in tree.pos()]


def strip_label(label: str) -> str:
    """Drop function tags and indices: ``NP-SBJ-1`` -> ``NP``, ``NP=2`` -> ``NP``.

    A label that starts with ``-`` (``-NONE-``, ``-LRB-``) stays whole; so does ``""``.
    """
    if not label or label[0] == "-":
        return label
    for i, ch in enumerate(label):
        if (ch == "-" or ch == "=") and i > 0:
            return label[:i]
    return label


def strip_function_tags(tree: Tree) -> Tree:
    """A copy of ``tree`` with :func:`strip_label` applied to every label, POS tags included."""
    return Tree(
        strip_label(tree.label()),
        [strip_function_tags(c) if isinstance(c, Tree) else c for c in tree],
    )


def drop_empty_elements(tree: Tree, empty_tags: Iterable[str] = EMPTY_TAGS) -> Tree | None:
    """A copy without empty-element preterminals (``-NONE-``) and without the nodes they leave
    childless; ``None`` when nothing is left."""
    tags = frozenset(empty_tags)

    def walk(node: Tree) -> Tree | None:
        if is_preterminal(node):
            return None if node.label() in tags else Tree(node.label(), [node[0]])
        kept = []
        for child in node:
            if isinstance(child, Tree):
                child = walk(child)
                if child is not None:
                    kept.append(child)
            else:
                kept.append(child)
        return Tree(node.label(), kept) if kept else None

    return walk(tree)


def constituents(tree: Tree) -> list[tuple[str, int, int]]:
    """``(label, start, end)`` of every phrasal node (not preterminals, root included), in
    pre-order (a parent before its children); spans are word indices, end exclusive."""
    out: list[tuple[str, int, int]] = []

    def walk(node: Tree, start: int) -> int:
        if not isinstance(node, Tree):
            return start + 1
        if is_preterminal(node):
            return start + 1
        slot = len(out)
        out.append(("", 0, 0))
        end = start
        for child in node:
            end = walk(child, end)
        out[slot] = (node.label(), start, end)
        return end

    walk(tree, 0)
    return out


def _tags_for(word_list: Sequence[str], tags: Sequence[str] | None) -> list[str]:
    if tags is None:
        return [UNKNOWN_TAG] * len(word_list)
    if len(tags) != len(word_list):
        raise TreeError(f"{len(word_list)} words but {len(tags)} tags")
    return list(tags)


def flat_tree(
    word_list: Sequence[str],
    tags: Sequence[str] | None = None,
    root: str | None = "ROOT",
    phrase: str = "S",
) -> Tree:
    """``(ROOT (S (T1 w1) (T2 w2) ...))``: a well-formed tree when no grammar is at hand.

    Missing tags are :data:`UNKNOWN_TAG`; ``root=None`` returns the ``phrase`` node itself.
    """
    if not word_list:
        raise TreeError("a tree needs at least one word")
    tag_list = _tags_for(word_list, tags)
    node = Tree(phrase, [Tree(t, [w]) for w, t in zip(word_list, tag_list, strict=True)])
    return node if root is None else Tree(root, [node])


def tree_from_spans(
    word_list: Sequence[str],
    tags: Sequence[str] | None,
    spans: Iterable[tuple[str, int, int]],
    root: str | None = "ROOT",
) -> Tree:
    """Build the tree whose phrasal nodes are exactly ``spans`` (``(label, start, end)``).

    Spans must nest (two spans that overlap without one containing the other raise
    :class:`TreeError`). Equal spans become a unary chain, the one listed first on top, so
    ``tree_from_spans(words(t), pos_tags(t), constituents(t), root=None) == t`` for a tree whose
    words all sit in preterminals. With ``root`` a node of that label covers everything; with
    ``root=None`` exactly one span must cover all words and it becomes the root.
    """
    n = len(word_list)
    if n == 0:
        raise TreeError("a tree needs at least one word")
    tag_list = _tags_for(word_list, tags)
    items = list(spans)
    for label, start, end in items:
        if not (0 <= start < end <= n):
            raise TreeError(f"span {label} ({start}, {end}) is empty or outside 0..{n}")
    order = sorted(range(len(items)), key=lambda k: (items[k][1], -items[k][2], k))
    if root is not None:
        items.append((root, 0, n))
        order.insert(0, len(items) - 1)
    elif not items or items[order[0]][1:] != (0, n):
        raise TreeError("with root=None one span must cover all the words")

    # open nodes as (label, start, end, children); spans arrive sorted by start, longest first
    stack: list[tuple[str, int, int, list[Any]]] = []
    done: list[Tree] = []
    position = 0  # next word not yet placed

    def fill(children: list[Any], limit: int) -> None:
        nonlocal position
        while position < limit:
            children.append(Tree(tag_list[position], [word_list[position]]))
            position += 1

    def close_top() -> None:
        label, _, end, children = stack.pop()
        fill(children, end)
        node = Tree(label, children)
        (stack[-1][3] if stack else done).append(node)

    for k in order:
        label, start, end = items[k]
        while stack and stack[-1][2] <= start:
            close_top()
        if stack:
            parent = stack[-1]
            if end > parent[2]:
                raise TreeError(
                    f"span {label} ({start}, {end}) crosses {parent[0]} ({parent[1]}, {parent[2]})"
                )
            fill(parent[3], start)
        elif done:
            raise TreeError(f"span {label} ({start}, {end}) lies outside the root span")
        stack.append((label, start, end, []))
    while stack:
        close_top()
    return done[0]
