"""Feature annotations (parser.annotate): what each split marks, and that unbinarizing removes
every mark again. The features follow Klein and Manning 2003 (Accurate unlexicalized parsing,
section 4, from memory); the expected labels below are worked out by hand."""

from __future__ import annotations

import pytest
from nltk import Tree

from parser.annotate import ANNOTATORS, annotators_for, functions_kept
from parser.binarize import binarize, clean_tree, unbinarize
from parser.errors import GrammarError

SENTENCE = Tree.fromstring("""
(ROOT (S (NP-SBJ (NP (NNP Mara) (POS 's)) (NN ferry))
  (VP (VBZ is) (ADJP-PRD (RB very) (JJ late))
    (NP-TMP (DT this) (NN morning))
    (PP (IN of) (NP (NP (DT that)) (CC but) (NP (CD 5) (NN %)))))
  (. .)))""")


def _labels(features: list[str]) -> set[str]:
    cleaned = clean_tree(SENTENCE, functions_kept(features))
    b = binarize(cleaned, horizontal=1, vertical=1, annotators=annotators_for(features))
    assert unbinarize(b) == clean_tree(SENTENCE)
    return {st.label() for st in b.subtrees() if not st.label().startswith("@")}


@pytest.mark.parametrize(
    "feature,marked",
    [
        ("split-vp", "VP~fin"),
        ("unary-dt", "DT~u"),
        ("in-grandparent", "IN~VP"),
        ("split-aux", "VBZ~be"),
        ("split-cc", "CC~but"),
        ("split-percent", "NN~pct"),
        ("tmp-np", "NP~tmp"),
        ("possessive-np", "NP~poss"),
        ("base-np", "NP~b"),
        ("right-rec-np", "NP~r"),
        ("function-tags", "ADJP~prd"),
    ],
)
def test_feature_marks(feature: str, marked: str) -> None:
    assert marked in _labels([feature])


def test_features_mark_only_their_nodes() -> None:
    labels = _labels(["unary-dt", "tmp-np", "split-aux"])
    # "this" has a sibling, "that" is alone; only the temporal NP carries ~tmp.
    assert "DT" in labels and "DT~u" in labels
    assert sum(lab.startswith("NP~tmp") for lab in labels) == 1
    assert "NN" in labels  # "ferry", "morning" and "%" are not verbs: no aux split


def test_every_feature_round_trips_together() -> None:
    _labels(sorted(ANNOTATORS))


def test_unknown_feature_is_an_error() -> None:
    with pytest.raises(GrammarError, match="unknown annotation"):
        annotators_for(["split-everything"])
