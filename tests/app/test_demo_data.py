"""Checks on the demo corpus in ``app/demo``: hand-bracketed gold trees and raw sentences.

The demo is the invented Saltmarrow Ferry Cooperative (engine log, committee minutes,
timetable notices). These tests read every gold tree with NLTK's bracketed reader and check it
against the Penn Treebank tag and label inventories, against well-formedness rules, against
the corpus' own function-tag policy (see ``app/demo/CONVENTIONS.md``), and check that every
closed-class word keeps one tag (or a documented small set). The raw files must hold
PTB-tokenized sentences that do not repeat a gold sentence.

Cost: linear in the number of tree nodes (a few thousand); well under a second.
"""

from __future__ import annotations

import re
from collections import defaultdict
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest
from nltk import Tree

DEMO_DIR = Path(__file__).resolve().parents[2] / "app" / "demo"
DOCUMENTS = ("engine_log", "committee_minutes", "timetable_notices")
GOLD_FILES = tuple(DEMO_DIR / f"gold_{name}.ptb" for name in DOCUMENTS)
RAW_FILES = tuple(DEMO_DIR / f"raw_{name}.txt" for name in DOCUMENTS)

MIN_TOTAL = 64  # the README promises more than 60 gold trees and 60 raw sentences
MIN_PER_DOCUMENT = 21
GOLD_LENGTH = (5, 35)  # tokens per gold sentence, inclusive
RAW_LENGTH = (5, 40)  # tokens per raw sentence, inclusive

# Part-of-speech tags of the Penn Treebank: Marcus, Santorini and Marcinkiewicz 1993,
# "Building a Large Annotated Corpus of English: The Penn Treebank", Computational
# Linguistics 19(2), table of the POS tag set (from memory). In the bracketed files the
# brackets are written -LRB- / -RRB- and the quotes `` / ''.
PTB_POS_TAGS = frozenset(
    "CC CD DT EX FW IN JJ JJR JJS LS MD NN NNS NNP NNPS PDT POS PRP PRP$ RB RBR RBS RP SYM TO "
    "UH VB VBD VBG VBN VBP VBZ WDT WP WP$ WRB # $ . , : `` '' -LRB- -RRB-".split()
)
# HYPH (a split-off hyphen) and NFP (superfluous punctuation) are later additions used in
# OntoNotes-style and GUM-style bracketing, not in the 1993 table (from memory; HYPH is visible
# in ../shared/data/gum-trees).
EXTRA_POS_TAGS = frozenset({"HYPH", "NFP"})
POS_TAGS = PTB_POS_TAGS | EXTRA_POS_TAGS

# Phrase and clause labels of Treebank II bracketing: Bies, Ferguson, Katz and MacIntyre 1995,
# "Bracketing Guidelines for Treebank II Style Penn Treebank Project", sections on clause and
# phrase level labels (from memory).
PTB_PHRASE_LABELS = frozenset(
    "S SBAR SBARQ SINV SQ ADJP ADVP CONJP FRAG INTJ LST NAC NP NX PP PRN PRT QP RRC UCP VP "
    "WHADJP WHADVP WHNP WHPP X".split()
)
# NML (nominal modifier inside a flat NP): Vadas and Curran 2007, "Adding Noun Phrase
# Structure to the Penn Treebank", ACL (from memory). ROOT: the wrapper node added above the
# original unlabelled top bracket, common practice, no source (GUM files use it too).
PHRASE_LABELS = PTB_PHRASE_LABELS | {"NML"}
ROOT_LABEL = "ROOT"

# Function tags of Treebank II (Bies et al. 1995, function tag list, from memory).
PTB_FUNCTION_TAGS = frozenset(
    "ADV NOM DTV LGS PRD PUT SBJ TPC VOC BNF DIR EXT LOC MNR PRP TMP CLR CLF HLN TTL".split()
)
# The demo corpus' own, deliberately small policy (app/demo/CONVENTIONS.md).
CORPUS_FUNCTION_TAGS = frozenset({"SBJ", "TMP", "LOC", "PRD"})
# Where each function tag may sit, by the label of the parent (function tags stripped).
FUNCTION_TAG_PARENTS = {
    "SBJ": frozenset({"S", "SQ", "SINV"}),
    "PRD": frozenset({"VP", "SQ", "SINV"}),
    "TMP": frozenset({"S", "SQ", "SINV", "SBARQ", "VP"}),
    "LOC": frozenset({"S", "SQ", "SINV", "SBARQ", "VP"}),
}

# Closed-class POS tags (common practice, no source: the tags whose word lists are fixed).
CLOSED_CLASS_TAGS = frozenset("CC DT EX IN MD PDT POS PRP PRP$ RP TO WDT WP WP$ WRB".split())
# Word forms (lower-cased) allowed more than one tag when at least one use is closed-class.
# Every entry must be attested with two or more of its tags, so the table cannot go stale.
DOCUMENTED_AMBIGUITY: dict[str, frozenset[str]] = {
    # demonstrative ("that evening"), complementizer ("noted that ..."), relative ("... that
    # lifts the bow door")
    "that": frozenset({"DT", "IN", "WDT"}),
    # preposition or subordinator ("before the guide goes on sale") vs. adverb ("the day before")
    "before": frozenset({"IN", "RB"}),
    # preposition head of "out of the water" vs. particle ("takes the ferry out")
    "out": frozenset({"IN", "RP"}),
    # modal ("Foot passengers may buy ...") vs. the month ("9 May"); forms are lower-cased
    "may": frozenset({"MD", "NNP"}),
}

VERBAL_HEADS = frozenset({"VB", "VBD", "VBG", "VBN", "VBP", "VBZ", "MD", "TO"})
FINAL_PUNCT = frozenset({".", "?", "!"})


@dataclass(frozen=True)
class GoldTree:
    """One gold tree and where it came from."""

    path: Path
    line: int
    tree: Tree

    @property
    def where(self) -> str:
        return f"{self.path.name}:{self.line}"


def split_label(label: str) -> tuple[str, list[str]]:
    """Split ``NP-SBJ`` into ``("NP", ["SBJ"])``; bracket tags like ``-LRB-`` stay whole."""
    if label.startswith("-") or label in POS_TAGS:
        return label, []
    base, *tags = label.split("-")
    return base, tags


def read_gold(path: Path) -> list[GoldTree]:
    """Read one tree per line; a tree that does not read fails with file and line."""
    trees = []
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        if not line.strip():
            pytest.fail(f"{path.name}:{number}: empty line (one tree per line, no blank lines)")
        try:
            tree = Tree.fromstring(line)
        except ValueError as error:
            pytest.fail(f"{path.name}:{number}: does not read as a bracketed tree: {error}")
        trees.append(GoldTree(path, number, tree))
    return trees


@pytest.fixture(scope="module")
def gold() -> list[GoldTree]:
    return [item for path in GOLD_FILES for item in read_gold(path)]


def raw_lines() -> Iterator[tuple[Path, int, str]]:
    for path in RAW_FILES:
        for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
            yield path, number, line


def nodes(tree: Tree) -> Iterator[tuple[Tree, Tree | None]]:
    """Every subtree with its parent (None for the top)."""
    stack: list[tuple[Tree, Tree | None]] = [(tree, None)]
    while stack:
        node, parent = stack.pop()
        yield node, parent
        stack.extend((child, node) for child in node if isinstance(child, Tree))


def is_preterminal(node: Tree) -> bool:
    return len(node) > 0 and all(not isinstance(child, Tree) for child in node)


# --- (a) reading, ROOT wrapper, counts -------------------------------------------------------


def test_gold_files_read_line_by_line_with_a_root_wrapper(gold: list[GoldTree]) -> None:
    for item in gold:
        tree = item.tree
        assert tree.label() == ROOT_LABEL, f"{item.where}: top label {tree.label()!r}, not ROOT"
        assert len(tree) == 1 and isinstance(tree[0], Tree), (
            f"{item.where}: ROOT must wrap exactly one constituent"
        )
        top, _ = split_label(tree[0].label())
        assert top in {"S", "SBARQ", "SQ", "SINV", "FRAG", "NP"}, (
            f"{item.where}: unexpected top constituent {top}"
        )


def test_gold_has_enough_trees_in_every_document(gold: list[GoldTree]) -> None:
    per_file: dict[str, int] = defaultdict(int)
    for item in gold:
        per_file[item.path.name] += 1
    assert len(gold) >= MIN_TOTAL, f"only {len(gold)} gold trees"
    for path in GOLD_FILES:
        assert per_file[path.name] >= MIN_PER_DOCUMENT, f"{path.name}: {per_file[path.name]}"


def test_gold_sentence_lengths(gold: list[GoldTree]) -> None:
    low, high = GOLD_LENGTH
    for item in gold:
        n = len(item.tree.leaves())
        assert low <= n <= high, f"{item.where}: {n} tokens, outside {low}..{high}"


def test_gold_sentences_are_unique(gold: list[GoldTree]) -> None:
    seen: dict[tuple[str, ...], str] = {}
    for item in gold:
        words = tuple(item.tree.leaves())
        assert words not in seen, f"{item.where} repeats {seen.get(words)}"
        seen[words] = item.where


# --- (b) inventories -------------------------------------------------------------------------


def test_every_pos_tag_is_in_the_ptb_tag_set(gold: list[GoldTree]) -> None:
    for item in gold:
        for word, tag in item.tree.pos():
            assert tag in POS_TAGS, f"{item.where}: {word!r} has tag {tag!r}, not a PTB tag"


def test_every_phrase_label_is_a_ptb_label_with_known_function_tags(
    gold: list[GoldTree],
) -> None:
    for item in gold:
        for node, parent in nodes(item.tree):
            if parent is None or is_preterminal(node):
                continue
            base, tags = split_label(node.label())
            assert base in PHRASE_LABELS, f"{item.where}: label {node.label()!r} is not PTB"
            for tag in tags:
                assert tag in PTB_FUNCTION_TAGS, f"{item.where}: {node.label()!r}: unknown -{tag}"
                assert tag in CORPUS_FUNCTION_TAGS, (
                    f"{item.where}: {node.label()!r}: -{tag} is outside the demo's policy"
                )


# --- (c) well-formedness ---------------------------------------------------------------------


def test_trees_are_well_formed(gold: list[GoldTree]) -> None:
    for item in gold:
        for node, _parent in nodes(item.tree):
            label = node.label()
            assert len(node) > 0, f"{item.where}: node {label!r} has no children"
            leaves = [child for child in node if not isinstance(child, Tree)]
            if leaves:
                assert len(node) == 1, (
                    f"{item.where}: {label!r} mixes words and constituents "
                    f"(word outside a preterminal: {leaves})"
                )
                assert label in POS_TAGS, f"{item.where}: word {leaves[0]!r} under {label!r}"
            else:
                assert label not in POS_TAGS, (
                    f"{item.where}: POS tag {label!r} dominates a constituent (unary chain)"
                )
                if len(node) == 1:
                    child = node[0]
                    assert split_label(child.label())[0] != split_label(label)[0], (
                        f"{item.where}: unary {label} over {child.label()}"
                    )


def test_no_empty_elements(gold: list[GoldTree]) -> None:
    for item in gold:
        for word, tag in item.tree.pos():
            assert tag != "-NONE-" and not re.fullmatch(r"\*\w*\*?(-\d+)?|0", word), (
                f"{item.where}: empty element {word!r}"
            )


# --- bracketing conventions of the corpus ----------------------------------------------------


def test_function_tags_sit_where_the_policy_puts_them(gold: list[GoldTree]) -> None:
    for item in gold:
        for node, parent in nodes(item.tree):
            if parent is None:
                continue
            parent_base, _ = split_label(parent.label())
            for tag in split_label(node.label())[1]:
                allowed = FUNCTION_TAG_PARENTS[tag]
                assert parent_base in allowed, (
                    f"{item.where}: {node.label()} under {parent.label()}, expected under one "
                    f"of {sorted(allowed)}"
                )


def test_clause_level_noun_phrases_before_the_verb_phrase_are_subjects(
    gold: list[GoldTree],
) -> None:
    """Subjects are marked NP-SBJ consistently; a bare NP may not precede the clause's VP."""
    for item in gold:
        for node, _parent in nodes(item.tree):
            if split_label(node.label())[0] not in {"S", "SINV"}:
                continue
            labels = [child.label() for child in node]
            bases = [split_label(label)[0] for label in labels]
            if "VP" not in bases:
                continue
            for label, base in zip(labels[: bases.index("VP")], bases, strict=False):
                if base == "NP":
                    tags = split_label(label)[1]
                    assert "SBJ" in tags or "TMP" in tags, (
                        f"{item.where}: {label} before the VP in {node.label()} is unmarked"
                    )
            subjects = [label for label in labels if "SBJ" in split_label(label)[1]]
            assert len(subjects) <= 1, f"{item.where}: two subjects in one clause: {subjects}"


def test_every_verb_phrase_has_a_verbal_head(gold: list[GoldTree]) -> None:
    for item in gold:
        for node, _parent in nodes(item.tree):
            if split_label(node.label())[0] != "VP":
                continue
            kids = {split_label(child.label())[0] for child in node}
            assert kids & (VERBAL_HEADS | {"VP"}), (
                f"{item.where}: VP without a verb, modal, 'to' or VP: {node}"
            )


def test_final_punctuation_attaches_to_the_top_constituent(gold: list[GoldTree]) -> None:
    for item in gold:
        top = item.tree[0]
        tagged = item.tree.pos()
        finals = [i for i, (_word, tag) in enumerate(tagged) if tag in FINAL_PUNCT]
        assert finals, f"{item.where}: no sentence-final punctuation"
        last_word, last_tag = tagged[finals[-1]]
        direct = [(child[0], child.label()) for child in top if is_preterminal(child)]
        assert (last_word, last_tag) in direct, (
            f"{item.where}: final {last_word!r} is not a child of the top {top.label()}"
        )


# --- (e) closed-class consistency ------------------------------------------------------------


def closed_class_tag_sets(gold: list[GoldTree]) -> dict[str, set[str]]:
    """Lower-cased word -> every tag it receives, for words with a closed-class use."""
    tags_of: dict[str, set[str]] = defaultdict(set)
    for item in gold:
        for word, tag in item.tree.pos():
            tags_of[word.lower()].add(tag)
    return {word: tags for word, tags in tags_of.items() if tags & CLOSED_CLASS_TAGS}


def test_closed_class_words_keep_one_tag_or_a_documented_set(gold: list[GoldTree]) -> None:
    for word, tags in sorted(closed_class_tag_sets(gold).items()):
        if len(tags) == 1:
            continue
        allowed = DOCUMENTED_AMBIGUITY.get(word)
        assert allowed is not None, f"{word!r} is tagged {sorted(tags)}; pick one or document it"
        assert tags <= allowed, f"{word!r} is tagged {sorted(tags)}, documented {sorted(allowed)}"


def test_documented_ambiguities_are_attested(gold: list[GoldTree]) -> None:
    found = closed_class_tag_sets(gold)
    for word, allowed in DOCUMENTED_AMBIGUITY.items():
        assert len(found.get(word, set()) & allowed) >= 2, (
            f"{word!r} is documented as ambiguous but the gold uses {sorted(found.get(word, []))}"
        )


# --- (d) raw sentences -----------------------------------------------------------------------

# PTB tokenization keeps the period of these abbreviations on the token (common practice).
ABBREVIATIONS = frozenset({"Mr.", "Mrs.", "Ms.", "Dr.", "St.", "No."})
UNSPLIT_TOKEN = re.compile(
    r"""^[A-Za-z]+[.,;:?!]$  # punctuation glued to a word (p.m., with inner dots, is kept)
    | \w+n't$ | \w+'(s|re|ve|ll|d|m)$   # clitics not split off
    | [()]                   # brackets must be -LRB- / -RRB-
    | ^"|"$                  # straight quotes must be `` / ''
    | \w-\w                  # hyphens are split off as their own token
    """,
    re.VERBOSE,
)


def test_raw_files_have_enough_non_empty_lines() -> None:
    lines = list(raw_lines())
    for path, number, line in lines:
        assert line.strip(), f"{path.name}:{number}: empty line"
    assert len(lines) >= MIN_TOTAL, f"only {len(lines)} raw sentences"


def test_raw_lines_are_ptb_tokenized() -> None:
    low, high = RAW_LENGTH
    for path, number, line in raw_lines():
        assert line == line.strip() and "  " not in line and "\t" not in line, (
            f"{path.name}:{number}: tokens must be separated by single spaces"
        )
        tokens = line.split(" ")
        assert low <= len(tokens) <= high, f"{path.name}:{number}: {len(tokens)} tokens"
        for column, token in enumerate(tokens, start=1):
            if token in ABBREVIATIONS:
                continue
            assert not UNSPLIT_TOKEN.search(token), (
                f"{path.name}:{number}: token {column} {token!r} is not PTB-tokenized"
            )


def test_raw_lines_do_not_repeat_gold_or_each_other(gold: list[GoldTree]) -> None:
    gold_words = {tuple(item.tree.leaves()): item.where for item in gold}
    seen: dict[tuple[str, ...], str] = {}
    for path, number, line in raw_lines():
        words = tuple(line.split(" "))
        where = f"{path.name}:{number}"
        assert words not in gold_words, f"{where} repeats gold sentence {gold_words[words]}"
        assert words not in seen, f"{where} repeats {seen[words]}"
        seen[words] = where
