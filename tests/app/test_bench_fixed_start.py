"""Every annotator of a sentence starts from the same tree: the first opening fixes the
sentence's start (grammar version and suggestion), a retraining in between changes nothing,
and each annotation records what it started from. Grammars trained on slices of the shared GUM
trees (Zeldes 2017, CC BY)."""

from __future__ import annotations

import pytest

from app.models import Annotation, GrammarVersion, Sentence, Suggestion
from app.services.suggestions import grammar_for
from parser.chart import parse
from parser.trees import words, write_tree
from tests.app.bench_helpers import (
    assign,
    gum_grammar_bytes,
    heldout_gum_trees,
    install_grammar,
    make_corpus,
)


def _differing_sentences(db, people):
    """A corpus of held-out GUM sentences whose consensus trees differ between the two
    grammars (trained on 40 and on 20 GUM files), so that a start taken from the wrong
    grammar shows."""
    texts = [" ".join(words(t)) for t in heldout_gum_trees(30, min_words=12, max_words=30)]
    corpus, sentences = make_corpus(db, texts, labels=[], tags=[])
    assign(db, sentences, people.ann1, people.ann2)
    first = install_grammar(db, corpus, gum_grammar_bytes())
    g1 = grammar_for(db, first.id)
    second_bytes = gum_grammar_bytes(20)
    second = GrammarVersion(
        corpus_id=corpus.id, number=2, status=first.status, data=second_bytes, training_size=0
    )
    db.add(second)
    db.commit()
    g2 = grammar_for(db, second.id)
    differing = []
    for s in sentences:
        w = list(s.tokens)
        c1 = write_tree(parse(g1, w, posteriors=True).consensus)
        c2 = write_tree(parse(g2, w, posteriors=True).consensus)
        if c1 != c2:
            differing.append(s)
            if len(differing) == 2:  # the tests use two; parsing the rest only costs time
                break
    assert len(differing) >= 2, "the two grammars agree on every sentence: no test"
    return corpus, differing, first, second


def _activate(db, corpus, version) -> None:
    corpus.active_grammar_id = version.id
    db.commit()


@pytest.mark.slow
@pytest.mark.parametrize("first_user", ["ann1", "ann2"])
def test_fixed_start_is_the_same_for_both_annotators_across_a_retraining(
    db, people, login, first_user
) -> None:
    corpus, differing, v1, v2 = _differing_sentences(db, people)
    second_user = "ann2" if first_user == "ann1" else "ann1"
    s = differing[0]
    a = login(first_user)
    b = login(second_user)
    opened_first = a.client.get(f"/api/bench/{s.id}").json()
    assert opened_first["start_kind"] == "consensus"
    assert opened_first["start_grammar_version"] == 1
    _activate(db, corpus, v2)  # a retraining made version 2 active
    opened_second = b.client.get(f"/api/bench/{s.id}").json()
    assert opened_second["suggestion"]["grammar_version"] == 2  # readings: the active grammar
    assert opened_second["tree"] == opened_first["tree"]  # start: the sentence's fixed one
    assert opened_second["start_grammar_version"] == 1
    # the first opener reloading gets it again
    assert a.client.get(f"/api/bench/{s.id}").json()["tree"] == opened_first["tree"]
    # A sentence nobody opened before the retraining starts from version 2's consensus.
    other = differing[1]
    fresh = b.client.get(f"/api/bench/{other.id}").json()
    assert fresh["start_grammar_version"] == 2
    assert fresh["tree"] == fresh["suggestion"]["consensus"]
    # Both annotations record the start when they are created (first save).
    for who, opened in ((b, opened_second), (a, opened_first)):
        saved = who.client.post(
            f"/api/bench/{s.id}/revisions",
            headers=who.headers(),
            json={"base": 0, "tree": opened["tree"]},
        )
        assert saved.status_code == 201, saved.text
        assert saved.json()["annotation"]["start_kind"] == "consensus"
        assert saved.json()["annotation"]["start_grammar_version"] == 1
    db.expire_all()
    rows = db.query(Annotation).filter_by(sentence_id=s.id).all()
    assert len(rows) == 2
    expected = db.query(Suggestion).filter_by(sentence_id=s.id, grammar_version_id=v1.id).one()
    for row in rows:
        assert (row.start_kind, row.start_grammar_version_id, row.start_suggestion_id) == (
            "consensus",
            v1.id,
            expected.id,
        )
    assert expected.consensus == opened_first["tree"]


def test_fixed_start_flat_is_fixed_only_when_an_annotation_begins(db, people, login) -> None:
    texts = [
        "The port engine was stopped for an oil change .",
        "Check the bilge pump before the first crossing .",
    ]
    corpus, sentences = make_corpus(db, texts, labels=[], tags=[])
    assign(db, sentences, people.ann1, people.ann2)
    ann1, ann2 = login("ann1"), login("ann2")
    looked, worked = sentences
    # No grammar yet: a flat start, not fixed by looking...
    assert ann1.client.get(f"/api/bench/{looked.id}").json()["source"] == "flat"
    # ...but fixed by the first save.
    flat = ann1.client.get(f"/api/bench/{worked.id}").json()
    saved = ann1.client.post(
        f"/api/bench/{worked.id}/revisions",
        headers=ann1.headers(),
        json={"base": 0, "tree": flat["tree"]},
    )
    assert saved.json()["annotation"]["start_kind"] == "flat"
    install_grammar(db, corpus, gum_grammar_bytes())
    after = ann2.client.get(f"/api/bench/{looked.id}").json()
    assert after["source"] == "suggestion" and after["start_kind"] == "consensus"
    assert ann1.client.get(f"/api/bench/{looked.id}").json()["tree"] == after["tree"]
    other = ann2.client.get(f"/api/bench/{worked.id}").json()
    assert other["source"] == "flat" and other["tree"] == flat["tree"]
    db.expire_all()
    assert db.get(Sentence, worked.id).start_kind == "flat"
