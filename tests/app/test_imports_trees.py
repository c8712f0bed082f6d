"""Bracketed imports: as gold (provenance import) or as a named annotator's submitted work."""

from __future__ import annotations

from sqlalchemy import func, select

from app.models import (
    ANN_SUBMITTED,
    SENT_GOLD,
    SENT_IN_PROGRESS,
    SENT_IN_REVIEW,
    Annotation,
    Assignment,
    Corpus,
    Gold,
    Revision,
    Sentence,
)
from app.services.corpora import create_corpus
from app.services.imports import import_bytes

TREES = (
    "(ROOT (S (NP-SBJ (DT The) (NN ferry)) (VP (VBD left)) (. .)))\n"
    "(ROOT (S (NP-SBJ (NNP Wrennick)) (VP (VBD oiled) (NP (DT the) (NN winch))) (. .)))\n"
)
# Other annotators' takes on the same two sentences (the second differs: no NP over the object).
TREES_OTHER = (
    "(ROOT (S (NP-SBJ (DT The) (NN ferry)) (VP (VBD left)) (. .)))\n"
    "(ROOT (S (NP-SBJ (NNP Wrennick)) (VP (VBD oiled) (DT the) (NN winch)) (. .)))\n"
)


def _corpus(db, name: str) -> Corpus:
    return db.scalar(select(Corpus).where(Corpus.name == name))


def test_imports_trees_as_gold(db) -> None:
    result = import_bytes(db, TREES.encode(), source="seed.ptb", corpus_name="Seed", kind="gold")
    assert result.imported == 2
    sentences = list(db.scalars(select(Sentence).order_by(Sentence.position)))
    assert [s.state for s in sentences] == [SENT_GOLD, SENT_GOLD]
    assert sentences[1].tokens == ["Wrennick", "oiled", "the", "winch", "."]
    golds = list(db.scalars(select(Gold).order_by(Gold.id)))
    assert [g.provenance for g in golds] == ["import", "import"]
    assert golds[0].tree == TREES.splitlines()[0]
    assert "seed.ptb, line 2" in golds[1].note


def test_imports_trees_derive_label_and_tag_sets(db) -> None:
    import_bytes(db, TREES.encode(), source="seed.ptb", corpus_name="Seed", kind="gold")
    corpus = _corpus(db, "Seed")
    assert corpus.label_set == ["NP", "NP-SBJ", "ROOT", "S", "VP"]
    assert corpus.tag_set == [".", "DT", "NN", "NNP", "VBD"]


def test_imports_trees_explicit_label_set_is_kept(db) -> None:
    create_corpus(db, "Fixed", label_set=["S", "NP", "VP", "ROOT"], tag_set=["NN"])
    db.commit()
    import_bytes(db, TREES.encode(), source="seed.ptb", corpus_name="Fixed", kind="gold")
    corpus = _corpus(db, "Fixed")
    assert corpus.label_set == ["S", "NP", "VP", "ROOT"] and corpus.tag_set == ["NN"]


def test_imports_trees_multiline_wrapper_and_empty_elements(db) -> None:
    text = (
        "( (S\n    (NP-SBJ-1 (NNS Crews))\n    (VP (VBD tried)\n"
        "      (S (NP-SBJ (-NONE- *-1)) (VP (TO to) (VP (VB leave)))))\n    (. .)))\n"
        "\n(ROOT (FRAG (NP (NN Fog)) (. .)))\n"
    )
    result = import_bytes(db, text.encode(), source="m.ptb", corpus_name="M", kind="gold")
    assert result.imported == 2 and result.empty_elements_dropped == 1
    first, second = db.scalars(select(Sentence).order_by(Sentence.position))
    assert first.tokens == ["Crews", "tried", "to", "leave", "."]
    gold_first = db.scalar(select(Gold).where(Gold.sentence_id == first.id))
    assert "-NONE-" not in gold_first.tree and "\n" not in gold_first.tree
    assert "m.ptb, line 7" in db.scalar(select(Gold.note).where(Gold.sentence_id == second.id))


def test_imports_trees_as_annotations(db, people) -> None:
    result = import_bytes(
        db,
        TREES.encode(),
        source="ann1.ptb",
        corpus_name="Pairs",
        document_name="log",
        kind="annotation",
        annotator="ann1",
    )
    assert result.imported == 2
    anns = list(db.scalars(select(Annotation).order_by(Annotation.id)))
    assert [(a.user_id, a.state, a.head) for a in anns] == [(people.ann1.id, ANN_SUBMITTED, 1)] * 2
    revs = list(db.scalars(select(Revision).order_by(Revision.id)))
    assert [(r.number, r.source) for r in revs] == [(1, "import"), (1, "import")]
    assert db.scalar(select(func.count()).select_from(Assignment)) == 2
    # one annotator of the two the corpus wants: the sentences wait for the second
    assert set(db.scalars(select(Sentence.state))) == {SENT_IN_PROGRESS}


def test_imports_trees_second_annotator_attaches_and_is_routed(db, people) -> None:
    import_bytes(
        db,
        TREES.encode(),
        source="ann1.ptb",
        corpus_name="Pairs",
        document_name="log",
        kind="annotation",
        annotator="ann1",
    )
    result = import_bytes(
        db,
        TREES_OTHER.encode(),
        source="ann2.ptb",
        corpus_name="Pairs",
        document_name="log",
        kind="annotation",
        annotator="ann2",
    )
    assert result.attached == 2 and result.imported == 0
    assert db.scalar(select(func.count()).select_from(Sentence)) == 2
    first, second = db.scalars(select(Sentence).order_by(Sentence.position))
    # identical trees become gold (corpus default), differing ones go to review
    assert first.state == SENT_GOLD
    assert second.state == SENT_IN_REVIEW
