"""PARSEVAL labelled bracketing scores (Black et al. 1991) for a test tree against a gold tree.

What is counted (each convention is a field of :class:`ScoringOptions`, switchable):

- A constituent is a triple ``(label, start, end)`` over the words of a phrasal node;
  preterminals are not counted (``count_preterminals``).
- The outermost node is not counted when its label is ``""``, ``ROOT`` or ``TOP``; when it has a
  single child that also carries such a label, that one is skipped too (``root_labels``).
- Function tags and indices are stripped (``NP-SBJ-1`` -> ``NP``); labels that begin with ``-``
  stay whole (``strip_function_tags``, rule of :func:`parser.trees.strip_label`).
- Words whose GOLD POS tag is one of ``, . : `` '' -NONE- HYPH NFP`` are removed before spans
  are counted: span indices are recomputed over the kept words, and constituents left without
  words are dropped (``delete_pos``). The same positions are removed from the test tree.
- Duplicate triples (a unary chain ``NP -> NP``) count as a multiset: two gold ``NP (0, 2)``
  need two test ones to match both (``multiset``).
- Labels of one equivalence class count as one label, named by its members joined with ``/``
  (``equivalences``, e.g. ``[{"ADVP", "PRT"}]`` gives ``ADVP/PRT``).

Figures: matched, gold and test counts give precision = matched / test, recall = matched / gold,
F1 = 2 * matched / (gold + test). When a count is zero: with no constituents on either side
P = R = F1 = 1.0 (nothing to disagree on, the common practice); with constituents on one side
only, all three are 0.0. A crossing bracket is a test constituent that overlaps a gold
constituent without either containing the other. POS accuracy is over the kept words. A corpus
score sums the counts over sentences (micro-average); rates over zero sentences or zero words
follow the same "nothing to disagree on" convention.

Complexity: O(n + g * t) per sentence for n words, g gold and t test constituents (the crossing
count compares spans pairwise; sentences are short). The words of the two trees must be
identical, or :class:`WordMismatchError` names the first differing position.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any, NamedTuple

from nltk import Tree

from parser.errors import ParserError
from parser.trees import strip_label

__all__ = [
    "DEFAULT_DELETE_POS",
    "DEFAULT_ROOT_LABELS",
    "CorpusScore",
    "Counts",
    "ScoringError",
    "ScoringOptions",
    "SentenceScore",
    "WordMismatchError",
    "label_confusions",
    "score_corpus",
    "score_pair",
]

DEFAULT_DELETE_POS = frozenset({",", ".", ":", "``", "''", "-NONE-", "HYPH", "NFP"})
DEFAULT_ROOT_LABELS = frozenset({"", "ROOT", "TOP"})

Triple = tuple[str, int, int]


class ScoringError(ParserError):
    """Two trees (or two tree lists) that cannot be scored against each other."""


class WordMismatchError(ScoringError):
    """The gold and the test tree do not have the same words.

    ``index`` is the 0-based position of the first difference; ``gold_word`` / ``test_word`` are
    the words there (``None`` past the end of the shorter sentence); ``sentence`` is the 1-based
    number of the pair when the error comes from :func:`score_corpus`.
    """

    def __init__(
        self, index: int, gold_word: str | None, test_word: str | None, sentence: int | None = None
    ) -> None:
        self.index = index
        self.gold_word = gold_word
        self.test_word = test_word
        self.sentence = sentence
        where = f"tree {sentence}: " if sentence is not None else ""
        super().__init__(
            f"{where}the words differ at word {index + 1}: gold {gold_word!r}, test {test_word!r}"
        )


@dataclass(frozen=True)
class ScoringOptions:
    """The conventions of the count; the defaults are those of the module docstring."""

    strip_function_tags: bool = True
    root_labels: frozenset[str] = DEFAULT_ROOT_LABELS
    delete_pos: frozenset[str] = DEFAULT_DELETE_POS
    count_preterminals: bool = False
    multiset: bool = True
    equivalences: tuple[frozenset[str], ...] = ()
    _canonical: Mapping[str, str] = field(init=False, repr=False, compare=False)
    _memo: dict[str, str] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "root_labels", frozenset(self.root_labels))
        object.__setattr__(self, "delete_pos", frozenset(self.delete_pos))
        classes = tuple(frozenset(c) for c in self.equivalences)
        object.__setattr__(self, "equivalences", classes)
        canonical: dict[str, str] = {}
        for members in classes:
            name = "/".join(sorted(members))
            for label in members:
                if label in canonical:
                    raise ScoringError(f"the label {label!r} is in two equivalence classes")
                canonical[label] = name
        object.__setattr__(self, "_canonical", canonical)
        object.__setattr__(self, "_memo", {})

    def label(self, label: str) -> str:
        """``label`` as it is compared: stripped (if so set), then mapped to its class."""
        done = self._memo.get(label)
        if done is None:
            stripped = strip_label(label) if self.strip_function_tags else label
            done = self._memo[label] = self._canonical.get(stripped, stripped)
        return done

    def tag(self, tag: str) -> str:
        """A POS tag as it is compared (stripped if so set; no equivalence classes)."""
        return strip_label(tag) if self.strip_function_tags else tag


DEFAULT_OPTIONS = ScoringOptions()


def _ratio(part: int, whole: int, empty: float) -> float:
    return part / whole if whole else empty


@dataclass(frozen=True)
class Counts:
    """Matched, gold and test constituent counts, with the figures they give."""

    matched: int = 0
    gold: int = 0
    test: int = 0

    @property
    def precision(self) -> float:
        return _ratio(self.matched, self.test, 1.0 if self.gold == 0 else 0.0)

    @property
    def recall(self) -> float:
        return _ratio(self.matched, self.gold, 1.0 if self.test == 0 else 0.0)

    @property
    def f1(self) -> float:
        return _ratio(2 * self.matched, self.gold + self.test, 1.0)

    def __add__(self, other: Counts) -> Counts:
        return Counts(self.matched + other.matched, self.gold + other.gold, self.test + other.test)

    def to_dict(self) -> dict[str, float | int]:
        return {
            "precision": self.precision,
            "recall": self.recall,
            "f1": self.f1,
            "matched": self.matched,
            "gold": self.gold,
            "test": self.test,
        }


def _compare(gold: Counter[Any], test: Counter[Any]) -> Counts:
    matched = sum((gold & test).values())
    return Counts(matched, sum(gold.values()), sum(test.values()))


@dataclass(frozen=True)
class SentenceScore:
    """The score of one test tree against its gold tree."""

    labelled: Counts
    unlabelled: Counts
    per_label: Mapping[str, Counts]
    crossing: int
    pos_correct: int
    pos_total: int
    length: int  # words kept after deletion

    @property
    def matched(self) -> int:
        return self.labelled.matched

    @property
    def gold_count(self) -> int:
        return self.labelled.gold

    @property
    def test_count(self) -> int:
        return self.labelled.test

    @property
    def precision(self) -> float:
        return self.labelled.precision

    @property
    def recall(self) -> float:
        return self.labelled.recall

    @property
    def f1(self) -> float:
        return self.labelled.f1

    @property
    def exact(self) -> bool:
        """Every constituent matched on both sides (the labelled multisets are equal)."""
        c = self.labelled
        return c.matched == c.gold == c.test

    @property
    def pos_accuracy(self) -> float:
        return _ratio(self.pos_correct, self.pos_total, 1.0)


@dataclass(frozen=True)
class CorpusScore:
    """Micro-averaged figures over many sentences."""

    sentences: int
    labelled: Counts
    unlabelled: Counts
    per_label: Mapping[str, Counts]
    exact_count: int
    crossing_total: int
    zero_crossing_count: int
    pos_correct: int
    pos_total: int

    @property
    def precision(self) -> float:
        return self.labelled.precision

    @property
    def recall(self) -> float:
        return self.labelled.recall

    @property
    def f1(self) -> float:
        return self.labelled.f1

    @property
    def exact(self) -> float:
        """The share of sentences whose test tree matches the gold tree exactly."""
        return _ratio(self.exact_count, self.sentences, 1.0)

    @property
    def mean_crossing(self) -> float:
        return _ratio(self.crossing_total, self.sentences, 0.0)

    @property
    def zero_crossing(self) -> float:
        """The share of sentences without a crossing bracket."""
        return _ratio(self.zero_crossing_count, self.sentences, 1.0)

    @property
    def pos_accuracy(self) -> float:
        return _ratio(self.pos_correct, self.pos_total, 1.0)

    def to_dict(self) -> dict[str, Any]:
        """Plain data for JSON: the headline figures, ``unlabelled`` and ``per_label``."""
        return {
            "precision": self.precision,
            "recall": self.recall,
            "f1": self.f1,
            "exact": self.exact,
            "sentences": self.sentences,
            "matched": self.labelled.matched,
            "gold": self.labelled.gold,
            "test": self.labelled.test,
            "mean_crossing": self.mean_crossing,
            "zero_crossing": self.zero_crossing,
            "pos_accuracy": self.pos_accuracy,
            "unlabelled": self.unlabelled.to_dict(),
            "per_label": {
                label: counts.to_dict() for label, counts in sorted(self.per_label.items())
            },
        }


# --------------------------------------------------------------------------------------------
# extraction


_Node = tuple[str, int, int, bool, int]  # label, start, end, is preterminal, child count


def _collect(tree: Tree) -> tuple[list[str], list[str], list[_Node]]:
    """Words, the label above each word, and every node's span, in pre-order."""
    word_list: list[str] = []
    tags: list[str] = []
    nodes: list[_Node] = []

    def walk(node: Tree) -> None:
        start = len(word_list)
        slot = len(nodes)
        nodes.append(("", 0, 0, False, 0))
        has_subtree = False
        for child in node:
            if isinstance(child, Tree):
                walk(child)
                has_subtree = True
            else:
                word_list.append(child)
                tags.append(node.label())
        nodes[slot] = (
            node.label(),
            start,
            len(word_list),
            not has_subtree and len(node) == 1,
            len(node),
        )

    if isinstance(tree, Tree):
        walk(tree)
    return word_list, tags, nodes


def _check_words(gold: list[str], test: list[str]) -> None:
    if gold == test:
        return
    for i in range(max(len(gold), len(test))):
        g = gold[i] if i < len(gold) else None
        t = test[i] if i < len(test) else None
        if g != t:
            raise WordMismatchError(i, g, t)


def _kept_before(gold_tags: list[str], options: ScoringOptions) -> list[int]:
    """``kept[i]`` = how many kept words precede word ``i`` (length n + 1)."""
    kept = [0]
    for tag in gold_tags:
        kept.append(kept[-1] + (options.tag(tag) not in options.delete_pos))
    return kept


def _triples(nodes: list[_Node], kept: list[int], options: ScoringOptions) -> Counter[Any]:
    """The counted constituents as a multiset of ``(label, start, end)``."""
    first = 0  # the outermost nodes labelled ROOT, TOP or "" are skipped
    while first < len(nodes):
        label, _, _, preterminal, children = nodes[first]
        if preterminal or options.label(label) not in options.root_labels:
            break
        first += 1
        if children != 1:
            break
    out: Counter[Any] = Counter()
    for label, start, end, preterminal, _ in nodes[first:]:
        if preterminal and not options.count_preterminals:
            continue
        a, b = kept[start], kept[end]
        if a != b:
            out[(options.label(label), a, b)] += 1
    if not options.multiset:
        out = Counter(dict.fromkeys(out, 1))
    return out


def _spans(triples: Counter[Any], multiset: bool) -> Counter[Any]:
    spans: Counter[Any] = Counter()
    for (_, start, end), count in triples.items():
        spans[(start, end)] += count if multiset else 1
    if not multiset:
        spans = Counter(dict.fromkeys(spans, 1))
    return spans


def _per_label(gold: Counter[Any], test: Counter[Any]) -> dict[str, Counts]:
    counts: dict[str, list[int]] = {}
    for index, triples in enumerate((gold & test, gold, test)):
        for (label, _, _), n in triples.items():
            counts.setdefault(label, [0, 0, 0])[index] += n
    return {label: Counts(*c) for label, c in counts.items()}


def _crossing(gold: Counter[Any], test: Counter[Any]) -> int:
    """Test brackets (with multiplicity) that cross some gold bracket. Gold brackets nest, so a
    test span that is also a gold span crosses none and is not checked."""
    gold_list = list(gold)
    count = 0
    for (start, end), n in test.items():
        if (start, end) in gold:
            continue
        if any(s < start < e < end or start < s < end < e for s, e in gold_list):
            count += n
    return count


class _Prepared(NamedTuple):
    gold: Counter[Any]
    test: Counter[Any]
    gold_tags: list[str]
    test_tags: list[str]
    kept: list[int]


def _prepare(gold: Tree, test: Tree, options: ScoringOptions) -> _Prepared:
    gold_words, gold_tags, gold_nodes = _collect(gold)
    test_words, test_tags, test_nodes = _collect(test)
    _check_words(gold_words, test_words)
    kept = _kept_before(gold_tags, options)
    return _Prepared(
        _triples(gold_nodes, kept, options),
        _triples(test_nodes, kept, options),
        gold_tags,
        test_tags,
        kept,
    )


# --------------------------------------------------------------------------------------------
# public functions


def score_pair(gold: Tree, test: Tree, options: ScoringOptions | None = None) -> SentenceScore:
    """Score ``test`` against ``gold``; raises :class:`WordMismatchError` if the words differ."""
    options = options or DEFAULT_OPTIONS
    gold_triples, test_triples, gold_tags, test_tags, kept = _prepare(gold, test, options)
    gold_spans = _spans(gold_triples, options.multiset)
    test_spans = _spans(test_triples, options.multiset)
    pos_total = pos_correct = 0
    for i, (g_tag, t_tag) in enumerate(zip(gold_tags, test_tags, strict=True)):
        if kept[i] != kept[i + 1]:
            pos_total += 1
            pos_correct += options.tag(g_tag) == options.tag(t_tag)
    return SentenceScore(
        labelled=_compare(gold_triples, test_triples),
        unlabelled=_compare(gold_spans, test_spans),
        per_label=_per_label(gold_triples, test_triples),
        crossing=_crossing(gold_spans, test_spans),
        pos_correct=pos_correct,
        pos_total=pos_total,
        length=kept[-1],
    )


def score_corpus(
    pairs: Iterable[tuple[Tree, Tree]], options: ScoringOptions | None = None
) -> CorpusScore:
    """Micro-averaged score over ``(gold, test)`` pairs.

    A :class:`WordMismatchError` carries the 1-based number of the offending pair.
    """
    labelled = unlabelled = Counts()
    per_label: dict[str, Counts] = {}
    sentences = exact = crossing = zero_crossing = pos_correct = pos_total = 0
    for number, (gold, test) in enumerate(pairs, start=1):
        try:
            s = score_pair(gold, test, options)
        except WordMismatchError as err:
            raise WordMismatchError(
                err.index, err.gold_word, err.test_word, sentence=number
            ) from None
        sentences += 1
        labelled += s.labelled
        unlabelled += s.unlabelled
        for label, counts in s.per_label.items():
            per_label[label] = per_label.get(label, Counts()) + counts
        exact += s.exact
        crossing += s.crossing
        zero_crossing += s.crossing == 0
        pos_correct += s.pos_correct
        pos_total += s.pos_total
    return CorpusScore(
        sentences,
        labelled,
        unlabelled,
        per_label,
        exact,
        crossing,
        zero_crossing,
        pos_correct,
        pos_total,
    )


def label_confusions(
    gold: Tree, test: Tree, options: ScoringOptions | None = None
) -> Counter[tuple[str, str]]:
    """``(gold_label, test_label)`` counts for spans both trees have but label differently.

    On each span, labels present on both sides are matched off first (as multisets); the labels
    left over are paired in alphabetical order; an extra label on one side has no partner and is
    not counted. Sum the Counters of many sentences for a corpus view.
    """
    options = options or DEFAULT_OPTIONS
    gold_triples, test_triples = _prepare(gold, test, options)[:2]
    by_span: dict[tuple[int, int], tuple[Counter[Any], Counter[Any]]] = {}
    for side, triples in ((0, gold_triples), (1, test_triples)):
        for (label, start, end), count in triples.items():
            by_span.setdefault((start, end), (Counter(), Counter()))[side][label] += count
    confusions: Counter[tuple[str, str]] = Counter()
    for gold_labels, test_labels in by_span.values():
        common = gold_labels & test_labels
        left_gold = sorted((gold_labels - common).elements())
        left_test = sorted((test_labels - common).elements())
        for pair in zip(left_gold, left_test, strict=False):
            confusions[pair] += 1
    return confusions
