"""Corpora: creation, settings checks, counts, removal only with the typed name."""

from __future__ import annotations

import pytest
from sqlalchemy import func, select

from app.models import Annotation, Corpus, Document, Gold, Revision, Sentence
from app.services.corpora import (
    corpus_counts,
    corpus_overview,
    create_corpus,
    delete_corpus,
    effective_settings,
    sentence_page,
    update_corpus,
)
from app.services.errors import BadInput, Conflict
from app.services.imports import import_bytes

TREE = "(ROOT (S (NP-SBJ (NNS Gulls)) (VP (VBD circled)) (. .)))\n"


def test_corpora_create_and_refuse_duplicate_names(db) -> None:
    corpus = create_corpus(db, "  Net   loft ", description="repairs")
    db.commit()
    assert corpus.name == "Net loft" and corpus.label_set == []
    with pytest.raises(Conflict, match="exists already"):
        create_corpus(db, "Net loft")
    with pytest.raises(BadInput, match="needs a name"):
        create_corpus(db, "   ")
    with pytest.raises(BadInput, match="label set entry 2"):
        create_corpus(db, "Other", label_set=["NP", "N P"])


def test_corpora_settings_are_checked(db) -> None:
    corpus = create_corpus(db, "S")
    update_corpus(
        db,
        corpus,
        settings={
            "annotators_per_sentence": "3",
            "retrain_every": 10,
            "max_f1_drop": "0.05",
            "unknown_label_policy": "refuse",
            "auto_gold_when_identical": "no",
        },
    )
    values = effective_settings(corpus)
    assert values["annotators_per_sentence"] == 3 and values["max_f1_drop"] == 0.05
    assert values["unknown_label_policy"] == "refuse"
    assert values["auto_gold_when_identical"] is False
    for bad, message in [
        ({"annotators_per_sentence": 0}, "outside"),
        ({"annotators_per_sentence": "two"}, "not an integer"),
        ({"max_f1_drop": 1.5}, "outside"),
        ({"unknown_label_policy": "maybe"}, "not one of"),
        ({"colour": "red"}, "unknown corpus setting"),
    ]:
        with pytest.raises(BadInput, match=message):
            update_corpus(db, corpus, settings=bad)
    assert effective_settings(corpus)["annotators_per_sentence"] == 3


def test_corpora_explicit_label_set_stops_derivation(db) -> None:
    corpus = create_corpus(db, "L")
    update_corpus(db, corpus, label_set=["S", "NP"])
    db.commit()
    import_bytes(db, TREE.encode(), source="t.ptb", corpus_name="L", kind="gold")
    assert corpus.label_set == ["S", "NP"]


def test_corpora_counts_per_state_and_gold(db) -> None:
    import_bytes(db, TREE.encode(), source="g.ptb", corpus_name="C", kind="gold")
    import_bytes(db, b"One .\nTwo .\nThree .\n", source="t.txt", corpus_name="C")
    (row,) = corpus_overview(db)
    assert row.states["queued"] == 3 and row.states["gold"] == 1
    assert row.gold == 1 and row.documents == 2 and row.sentences == 4
    assert corpus_counts(db, row.corpus).states == row.states


def test_corpora_sentence_pages(db) -> None:
    text = "".join(f"Line {i} .\n" for i in range(120))
    import_bytes(db, text.encode(), source="t.txt", corpus_name="P")
    corpus = db.scalar(select(Corpus))
    page = sentence_page(db, corpus, page=3, per_page=50)
    assert page.total == 120 and page.pages == 3 and len(page.rows) == 20
    assert page.rows[0].sentence.text == "Line 100 ."
    assert sentence_page(db, corpus, state="gold").total == 0
    with pytest.raises(BadInput, match="unknown sentence state"):
        sentence_page(db, corpus, state="done")


def test_corpora_delete_needs_the_exact_name(db, people) -> None:
    import_bytes(db, TREE.encode(), source="g.ptb", corpus_name="Doomed", kind="gold")
    import_bytes(
        db,
        TREE.replace("Gulls", "Terns").encode(),
        source="a.ptb",
        corpus_name="Doomed",
        kind="annotation",
        annotator="ann1",
    )
    import_bytes(db, b"Survivor line .\n", source="s.txt", corpus_name="Kept")
    doomed = db.scalar(select(Corpus).where(Corpus.name == "Doomed"))
    with pytest.raises(BadInput, match="type its name exactly"):
        delete_corpus(db, doomed.id, "doomed")
    assert db.scalar(select(func.count()).select_from(Sentence)) == 3
    delete_corpus(db, doomed.id, "Doomed")
    db.commit()
    assert [c.name for c in db.scalars(select(Corpus))] == ["Kept"]
    for model, left in ((Document, 1), (Sentence, 1), (Gold, 0), (Annotation, 0), (Revision, 0)):
        assert db.scalar(select(func.count()).select_from(model)) == left, model
