"""Treewright's search patterns: word strings and bracketed fragments with holes.

A pattern is one of two things.

A **word string**: words separated by spaces, matched as consecutive words of a sentence,
ignoring case. ``*`` alone stands for any one word; ``*`` inside a word for any run of
characters (``engin*``, ``*ing``). Example: ``the * valve``.

A **bracketed fragment**, written the way trees are written, with holes::

    (NP)                    any NP (NP-SBJ, NP-TMP... too)
    (NP-SBJ)                only NPs with that function tag
    (NN valve*)             a preterminal NN over a word starting with "valve"
    (PP on (NP ...))        a PP of exactly two children: the word "on", then an NP
    (VP ... (NP) ...)       a VP with an NP among its children
    (S (NP) _ (VP))         an S of three children: NP, anything, VP
    (NP|NML ... ~valve)     an NP or NML with a child containing the word "valve" at any depth
    (* (DT the) ...)        any phrase whose first child is "the" tagged DT

Children are matched in order against all of a node's children: ``_`` is exactly one child of
any kind, ``...`` any number of children (none included), ``~X`` a child that is X or
contains X anywhere below it. A fragment with no children listed, ``(NP)``, leaves the children
open. A label is a name, ``*``, or alternatives ``A|B``; a name without a function tag
matches the label with its function tags stripped. A word child matches a preterminal (or bare
word) with that word. Words are written as in the trees (``-LRB-`` for a bracket) and match
regardless of case.

What it cannot express (said in the README too): negation ("an NP without a PP"), a
relation between two matches other than parent/child and ``~`` ancestor (no sisters outside
one parent, no precedence across the tree), counts, word strings inside a fragment other
than one word per child, regular expressions beyond ``*``, and alternatives of whole patterns.

Matching and cost:
    :func:`match_tree` visits every node once per fragment node that can match there; child
    lists with ``...`` are matched by a small dynamic programme over (pattern item, child)
    positions, so a node costs O(pattern children x node children). A word string is compiled
    to one regular expression over the space-joined lower-case words.
    :class:`SearchIndex` keeps, per entry, the words and (optionally) a tree; word strings run
    as one regular-expression scan over the whole corpus text (a C loop; offsets are mapped
    back to entries by bisection), fragments only visit the trees that contain every label and
    literal word the fragment requires (set intersections over postings).
"""

from __future__ import annotations

import bisect
import functools
import re
from array import array
from collections import defaultdict
from collections.abc import Callable, Hashable, Iterator, Sequence
from dataclasses import dataclass, field

from nltk import Tree

from parser.errors import ParserError
from parser.trees import is_preterminal, strip_label

__all__ = [
    "Fragment",
    "Pattern",
    "QuerySyntaxError",
    "SearchIndex",
    "WordString",
    "match_tree",
    "match_words",
    "parse_pattern",
]

MAX_PATTERN = 2000


class QuerySyntaxError(ParserError):
    """A malformed pattern, located by 1-based column."""

    def __init__(self, message: str, column: int) -> None:
        self.message = message
        self.column = column
        super().__init__(f"column {column}: {message}")


# --------------------------------------------------------------------------------------------
# the pattern model


@dataclass(frozen=True)
class WordTest:
    text: str  # lower case; may contain '*'

    @property
    def literal(self) -> bool:
        return "*" not in self.text

    def regex(self) -> str:
        if self.text == "*":
            return r"[^ \n]+"
        return "[^ \\n]*".join(re.escape(part) for part in self.text.split("*"))

    def matches(self, word: str) -> bool:
        if self.literal:
            return word.lower() == self.text
        return re.fullmatch(self.regex(), word.lower()) is not None


@dataclass(frozen=True)
class WordString:
    words: tuple[WordTest, ...]

    def regex(self) -> re.Pattern[str]:
        """The words over space-joined lower-case words; the caller checks that a match
        starts a word (a leading look-behind would stop the engine's literal-prefix scan)."""
        body = " ".join(w.regex() for w in self.words)
        return re.compile(rf"{body}(?![^ \n])")


@dataclass(frozen=True)
class Fragment:
    labels: tuple[str, ...] | None  # None: any label
    children: tuple[Child, ...] | None  # None: children left open

    def label_matches(self, label: str) -> bool:
        return self.labels is None or _label_test(self.labels)(label)


@functools.lru_cache(maxsize=4096)
def _base(label: str) -> str:
    return strip_label(label)


@functools.lru_cache(maxsize=256)
def _label_test(wants: tuple[str, ...]) -> Callable[[str], bool]:
    """A test for labels: a name without function tags matches the label stripped of its
    function tags; a name with them matches itself and longer forms (``NP-SBJ-1``)."""
    plain = frozenset(w for w in wants if w[0] != "-" and strip_label(w) == w)
    exact = frozenset(wants)
    tagged = tuple(w for w in wants if w not in plain)

    @functools.lru_cache(maxsize=4096)
    def test(label: str) -> bool:
        if label in exact or _base(label) in plain:
            return True
        return any(label.startswith(w + "-") or label.startswith(w + "=") for w in tagged)

    return test


@dataclass(frozen=True)
class Child:
    kind: str  # "node", "word", "any" (_), "gap" (...)
    node: Fragment | None = None
    word: WordTest | None = None
    deep: bool = False  # ~X


Pattern = WordString | Fragment


# --------------------------------------------------------------------------------------------
# reading a pattern


_TOKEN = re.compile(r"\s*(\(|\)|[^\s()]+)")


@dataclass
class _Reader:
    text: str
    tokens: list[tuple[str, int]] = field(default_factory=list)
    pos: int = 0

    def __post_init__(self) -> None:
        i = 0
        while i < len(self.text):
            m = _TOKEN.match(self.text, i)
            if m is None:
                break
            self.tokens.append((m.group(1), m.start(1) + 1))
            i = m.end()

    def peek(self) -> tuple[str, int] | None:
        return self.tokens[self.pos] if self.pos < len(self.tokens) else None

    def take(self) -> tuple[str, int]:
        tok = self.peek()
        if tok is None:
            raise QuerySyntaxError(
                "the pattern ends too early; a ')' is missing", len(self.text) + 1
            )
        self.pos += 1
        return tok


def _word(text: str, column: int) -> WordTest:
    if "**" in text:
        raise QuerySyntaxError(f"'{text}': write one '*' for any run of characters", column)
    return WordTest(text.lower())


def _label(text: str, column: int) -> tuple[str, ...] | None:
    if text == "*":
        return None
    parts = tuple(text.split("|"))
    for part in parts:
        if not part or "*" in part or part in ("_", "...") or part.startswith("~"):
            raise QuerySyntaxError(
                f"'{text}' is not a label (a name, '*' or names joined with '|')", column
            )
    return parts


def _fragment(reader: _Reader) -> Fragment:
    _, open_col = reader.take()  # the "("
    tok, col = reader.take()
    if tok in ("(", ")"):
        raise QuerySyntaxError("a label must follow '('", col)
    labels = _label(tok, col)
    children: list[Child] = []
    while True:
        nxt = reader.peek()
        if nxt is None:
            raise QuerySyntaxError(
                f"the '(' at column {open_col} is never closed", len(reader.text) + 1
            )
        tok, col = nxt
        if tok == ")":
            reader.take()
            break
        children.append(_child(reader))
    return Fragment(labels, tuple(children) if children else None)


def _child(reader: _Reader) -> Child:
    tok, col = reader.peek() or ("", 0)
    deep = False
    if tok.startswith("~"):
        deep = True
        if tok == "~":
            reader.take()
            nxt = reader.peek()
            if nxt is None or nxt[0] == ")":
                raise QuerySyntaxError("'~' needs a word or a bracket after it", col)
            tok, col = nxt
        else:
            reader.tokens[reader.pos] = (tok[1:], col + 1)
            tok, col = tok[1:], col + 1
    if tok == "(":
        return Child("node", node=_fragment(reader), deep=deep)
    reader.take()
    if tok == "_" or tok == "...":
        if deep:
            raise QuerySyntaxError(f"'~' cannot go before '{tok}'", col)
        return Child("any" if tok == "_" else "gap")
    return Child("word", word=_word(tok, col), deep=deep)


def parse_pattern(text: str) -> Pattern:
    """Read a pattern; :class:`QuerySyntaxError` says what is wrong and at which column."""
    if len(text) > MAX_PATTERN:
        raise QuerySyntaxError(f"the pattern is longer than {MAX_PATTERN} characters", 1)
    reader = _Reader(text)
    if not reader.tokens:
        raise QuerySyntaxError("the pattern is empty", 1)
    first, col = reader.tokens[0]
    if first == ")":
        raise QuerySyntaxError("')' without a '(' before it", col)
    if first != "(":
        for tok, c in reader.tokens:
            if tok in ("(", ")"):
                raise QuerySyntaxError(
                    "a word string cannot hold brackets; start the pattern "
                    "with '(' for a tree fragment",
                    c,
                )
            if tok in ("_", "...") or tok.startswith("~"):
                raise QuerySyntaxError(
                    f"'{tok}' belongs in a bracketed fragment; in a word "
                    "string '*' stands for any word",
                    c,
                )
        return WordString(tuple(_word(tok, c) for tok, c in reader.tokens))
    frag = _fragment(reader)
    rest = reader.peek()
    if rest is not None:
        raise QuerySyntaxError(f"unexpected '{rest[0]}' after the fragment's closing ')'", rest[1])
    return frag


# --------------------------------------------------------------------------------------------
# matching


def match_words(pattern: WordString, tokens: Sequence[str]) -> list[tuple[int, int]]:
    """Spans ``(start, end)`` of every place the word string occurs in ``tokens``."""
    n = len(pattern.words)
    low = [t.lower() for t in tokens]
    return [
        (i, i + n)
        for i in range(len(low) - n + 1)
        if all(w.matches(low[i + k]) for k, w in enumerate(pattern.words))
    ]


def _node_matches(frag: Fragment, node: Tree | str) -> bool:
    if not isinstance(node, Tree):
        return False
    if not frag.label_matches(node.label()):
        return False
    if frag.children is None:
        return True
    kids = list(node)
    items = frag.children
    # reach[i][j]: the first i pattern items can consume the first j children
    reach = [[False] * (len(kids) + 1) for _ in range(len(items) + 1)]
    reach[0][0] = True
    for i, item in enumerate(items):
        row, nxt = reach[i], reach[i + 1]
        for j in range(len(kids) + 1):
            if not row[j]:
                continue
            if item.kind == "gap":
                for k in range(j, len(kids) + 1):
                    nxt[k] = True
                break
            if j < len(kids) and _child_matches(item, kids[j]):
                nxt[j + 1] = True
    return reach[len(items)][len(kids)]


def _word_of(node: Tree | str) -> str | None:
    if isinstance(node, str):
        return node
    if is_preterminal(node):
        return str(node[0])
    return None


def _child_matches(item: Child, node: Tree | str) -> bool:
    if item.kind == "any":
        return True
    if item.deep:
        return _somewhere(item, node)
    if item.kind == "word":
        w = _word_of(node)
        assert item.word is not None
        return w is not None and item.word.matches(w)
    assert item.node is not None
    return _node_matches(item.node, node)


def _somewhere(item: Child, node: Tree | str) -> bool:
    """Does ``node`` or anything below it match the ``~`` item (without its ``~``)?"""
    todo = [node]
    while todo:
        here = todo.pop()
        if item.kind == "word":
            w = _word_of(here)
            assert item.word is not None
            if w is not None and item.word.matches(w):
                return True
        elif item.node is not None and _node_matches(item.node, here):
            return True
        if isinstance(here, Tree) and not is_preterminal(here):
            todo.extend(here)
    return False


def match_tree(pattern: Pattern, tree: Tree) -> list[tuple[int, int]]:
    """Spans of the nodes the fragment matches (pre-order), or of the word string's places."""
    if isinstance(pattern, WordString):
        return match_words(pattern, tree.leaves())
    out: list[tuple[int, int]] = []

    def walk(node: Tree | str, start: int) -> int:
        if not isinstance(node, Tree):
            return start + 1
        slot = len(out)
        hit = _node_matches(pattern, node)
        if hit:
            out.append((start, start))
        end = start
        for child in node:
            end = walk(child, end)
        if hit:
            out[slot] = (start, end)
        return end

    walk(tree, 0)
    return out


def _required(frag: Fragment, labels: list[tuple[str, ...]], words: list[str]) -> None:
    """Labels (as alternatives, function tags stripped) and literal words every match holds."""
    if frag.labels is not None:
        labels.append(tuple(sorted({strip_label(x) for x in frag.labels})))
    for child in frag.children or ():
        if child.node is not None:
            _required(child.node, labels, words)
        elif child.word is not None and child.word.literal:
            words.append(child.word.text)


# --------------------------------------------------------------------------------------------
# the index


@dataclass(frozen=True)
class Hit:
    key: Hashable
    entry: int  # position of the entry in the index (order of ``add``)
    spans: tuple[tuple[int, int], ...]


def _starts_of(rx: re.Pattern[str], text: str) -> Iterator[int]:
    """Where the word string matches in space-joined lines, overlapping matches included."""
    pos = 0
    while (m := rx.search(text, pos)) is not None:
        at = m.start()
        if at and text[at - 1] not in " \n":  # inside a word: look again further on
            pos = at + 1
            continue
        yield at
        # the next match may overlap this one: go on from the next word
        space = text.find(" ", at, m.end())
        pos = space + 1 if space >= 0 else m.end()


def _places(rx: re.Pattern[str], line: str, n: int) -> list[tuple[int, int]]:
    out = []
    for at in _starts_of(rx, line):
        first = line.count(" ", 0, at)
        out.append((first, first + n))
    return out


class SearchIndex:
    """Entries (a key, the words, optionally a tree) searchable by any pattern.

    Build once, search many times: ``add`` everything, then ``search``. Each entry's words are
    kept lower-cased and space-joined; postings map each word (and, for trees, each label) to
    the entries that hold it. Adding after a search is allowed.
    """

    def __init__(self) -> None:
        self.keys: list[Hashable] = []
        self.tokens: list[list[str]] = []
        self.trees: list[Tree | None] = []
        self._lines: list[str] = []
        self._joined: str | None = None
        self._starts: list[int] = []
        self._labels: dict[str, set[int]] = defaultdict(set)
        self._words: dict[str, array[int]] = {}

    def __len__(self) -> int:
        return len(self.keys)

    def add(self, key: Hashable, tokens: Sequence[str], tree: Tree | None = None) -> None:
        n = len(self.keys)
        self.keys.append(key)
        self.tokens.append(list(tokens))
        self.trees.append(tree)
        low = [t.lower() for t in tokens]
        self._lines.append(" ".join(low))
        for word in low:
            post = self._words.get(word)
            if post is None:
                self._words[word] = array("i", [n])
            elif post[-1] != n:
                post.append(n)
        if tree is not None:
            for sub in tree.subtrees():
                self._labels[strip_label(sub.label())].add(n)

    def _entries_with(self, test: WordTest) -> set[int] | None:
        """Entries holding a word the test accepts; None when every word does."""
        if test.text == "*":
            return None
        if test.literal:
            return set(self._words.get(test.text, ()))
        rx = re.compile(test.regex())
        found: set[int] = set()
        for word, post in self._words.items():
            if rx.fullmatch(word):
                found.update(post)
        return found

    def _narrow(self, sets: list[set[int]]) -> list[int] | None:
        """The entries in every set, in order; None when there is no constraint."""
        if not sets:
            return None
        sets.sort(key=len)
        found = set(sets[0])
        for s in sets[1:]:
            found &= s
            if not found:
                break
        return sorted(found)

    def _text(self) -> tuple[str, list[int]]:
        """All entries' lines joined by newlines, and where each line starts."""
        if self._joined is None or len(self._starts) != len(self._lines):
            starts, at = [], 0
            for line in self._lines:
                starts.append(at)
                at += len(line) + 1
            self._joined, self._starts = "\n".join(self._lines), starts
        return self._joined, self._starts

    def _word_hits(self, pattern: WordString) -> Iterator[Hit]:
        wanted = [s for w in pattern.words if (s := self._entries_with(w)) is not None]
        entries = self._narrow(wanted)
        n = len(pattern.words)
        rx = pattern.regex()
        if entries is None:  # only wildcards: one scan of the whole text
            yield from self._scan(rx, n)
            return
        lines, search = self._lines, rx.search
        for entry in entries:
            line = lines[entry]
            if search(line) is None:  # most candidates fail here, in C
                continue
            spans = _places(rx, line, n)
            if spans:
                yield Hit(self.keys[entry], entry, tuple(spans))

    def _scan(self, rx: re.Pattern[str], n: int) -> Iterator[Hit]:
        text, starts = self._text()
        spans: dict[int, list[tuple[int, int]]] = {}
        for at in _starts_of(rx, text):
            entry = bisect.bisect_right(starts, at) - 1
            first = text.count(" ", starts[entry], at)
            spans.setdefault(entry, []).append((first, first + n))
        for entry in sorted(spans):
            yield Hit(self.keys[entry], entry, tuple(spans[entry]))

    def candidates(self, frag: Fragment) -> list[int]:
        """Entries with a tree holding every label and literal word the fragment requires."""
        labels: list[tuple[str, ...]] = []
        words: list[str] = []
        _required(frag, labels, words)
        sets: list[set[int]] = []
        for alts in labels:
            union: set[int] = set()
            for label in alts:
                union |= self._labels.get(label, set())
            sets.append(union)
        sets.extend(set(self._words.get(w, ())) for w in words)
        found = self._narrow(sets)
        if found is None:
            return [i for i, t in enumerate(self.trees) if t is not None]
        return [i for i in found if self.trees[i] is not None]

    def search(self, pattern: Pattern) -> Iterator[Hit]:
        """Every entry that matches, in the order entries were added, with the match spans."""
        if isinstance(pattern, WordString):
            yield from self._word_hits(pattern)
            return
        for i in self.candidates(pattern):
            tree = self.trees[i]
            if tree is None:
                continue
            spans = match_tree(pattern, tree)
            if spans:
                yield Hit(self.keys[i], i, tuple(spans))
