"""Reference sets and the cold start: stored apart from the corpus, trained on with a recorded
weight, the early retraining cadence, and the queue ordered most informative first.

The reference trees here are invented (a harbour's older notes); the gold is the demo's.
"""

from __future__ import annotations

import math

import pytest
from sqlalchemy import func, select

from app.corpus_settings import CorpusSettings
from app.models import (
    GV_READY,
    AgreementRecord,
    Corpus,
    Document,
    GrammarVersion,
    ReferenceSet,
    Sentence,
)
from app.services import reference, training
from app.services.annotation import queue_page, queue_place
from app.services.assignment import assign_sentences
from app.services.corpora import update_corpus
from app.services.errors import BadInput, Conflict
from app.services.exports import export_gold
from app.services.imports import import_bytes
from app.services.suggestions import grammar_from_bytes
from parser.adapt import DEFAULT, GRID, describe, parse_weighting
from tests.app.review_helpers import import_demo_gold, wait_for_version
from tests.parser.test_chart_entropy import SMALL

OLDER = b"""(ROOT (S (NP (DT The) (NN lanternkeeper)) (VP (VBD trimmed) (NP (DT the) (NNS wicks)))
  (. .)))
(ROOT (S (NP (NNS Gulls)) (VP (VBD circled) (PP (IN over) (NP (DT the) (NN quayside)))) (. .)))
(ROOT (S (NP (PRP We)) (VP (VBD logged) (NP (DT the) (NN tide))) (. .)))
"""
LICENCE = "Invented for these tests; free to use."


def _add(db, corpus_id: int, data: bytes = OLDER, name: str = "harbour notes"):
    return reference.add_reference(
        db,
        corpus_id,
        data,
        name=name,
        source="older team notes",
        licence=LICENCE,
        filename="older.ptb",
    )


def test_reference_set_is_stored_with_source_and_licence(db):
    corpus = import_demo_gold(db, settings={"retrain_every": 0})
    added = _add(db, corpus.id)
    assert (added.trees, added.in_use, added.licence) == (3, True, LICENCE)
    assert added.words == 6 + 6 + 5
    [listed] = reference.reference_sets(db, corpus.id)
    assert listed == added and listed.source == "older team notes"
    trees = training.load_reference(db, corpus.id)
    assert [len(t) for _, t in trees] == [3]
    assert trees[0][1][1].leaves()[-2] == "quayside"


def test_reference_import_refuses_a_bad_file_and_stores_nothing(db):
    corpus = import_demo_gold(db, settings={"retrain_every": 0})
    with pytest.raises(BadInput, match=r"older.ptb, line 2"):
        _add(db, corpus.id, data=b"(ROOT (S (NP (NN a)) (VP (VB b))))\n(ROOT (S (NP (NN c))\n")
    with pytest.raises(BadInput, match="licence"):
        reference.add_reference(
            db, corpus.id, OLDER, name="x", source="", licence=" ", filename="older.ptb"
        )
    assert db.scalar(select(func.count(ReferenceSet.id))) == 0
    _add(db, corpus.id)
    with pytest.raises(Conflict, match="already has a reference set"):
        _add(db, corpus.id)


def test_reference_trees_never_reach_sentences_exports_or_agreement(app, db):
    corpus = import_demo_gold(db, settings={"retrain_every": 0})
    sentences = db.scalar(select(func.count(Sentence.id)))
    documents = db.scalar(select(func.count(Document.id)))
    before = export_gold(db, corpus.id).files
    _add(db, corpus.id)
    training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    assert db.scalar(select(func.count(Sentence.id))) == sentences
    assert db.scalar(select(func.count(Document.id))) == documents
    after = export_gold(db, corpus.id).files
    assert after == before
    assert not any("quayside" in text or "lanternkeeper" in text for text in after.values())
    assert db.scalar(select(func.count(AgreementRecord.id))) == 0


def test_training_with_reference_records_weight_sets_and_grid(app, db, monkeypatch):
    # every third demo tree held out: 25 of 75, enough for the grid (parsed in one batch with
    # the reference-only grammar); the version records the best point's F1 as its own. Parsed
    # in this process: worker processes would cost more to start than these short parses.
    monkeypatch.setattr(training, "parallel_parses", lambda: 1)
    corpus = import_demo_gold(db, settings={"retrain_every": 0, "heldout_every": 3})
    added = _add(db, corpus.id)
    v = training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    assert v.status == GV_READY
    assert v.options["reference"] == [{"id": added.id, "trees": 3}]
    assert v.options["reference_trees"] == 3
    adaptation = v.options["adaptation"]
    grid = adaptation["grid"]
    assert adaptation["setting"] == "auto"
    assert [x["weighting"] for x in grid] == [describe(w) for w in GRID]
    best = max(range(len(grid)), key=lambda i: (grid[i]["f1"], -i))
    # the best point, or plain counts when the best gains within the noise of 25 trees
    chosen = [x["weighting"] for x in grid].index(adaptation["weighting"])
    assert chosen == best or (chosen == 0 and "within the noise" in adaptation["reason"])
    assert v.heldout_f1 == pytest.approx(grid[chosen]["f1"], abs=1e-5)
    assert v.options["heldout"]["sentences"] == v.options["heldout_sampled"] >= 20
    # three harbour trees alone know almost nothing of the ferry's minutes
    assert 0.0 <= adaptation["reference_only_f1"] < v.heldout_f1
    stored = db.scalar(select(GrammarVersion).where(GrammarVersion.id == v.id))
    grammar = grammar_from_bytes(stored.data)
    assert "quayside" in grammar.vocab and grammar.meta["reference_trees"] == 3
    assert grammar.meta["weighting"] == parse_weighting(adaptation["weighting"]).to_dict()


def test_training_with_a_fixed_weight_and_a_set_not_in_use(app, db):
    corpus = import_demo_gold(
        db, settings={"retrain_every": 0, "reference_weight": "rules=3,lexicon=6"}
    )
    added = _add(db, corpus.id)
    v = training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    assert v.options["adaptation"]["weighting"] == "rules=3,lexicon=6"
    reference.set_in_use(db, added.id, False)
    v2 = training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    assert v2.options["reference"] == [] and v2.options["reference_trees"] == 0
    assert training.weight_text(v2) == "gold only"


def test_reference_alone_trains_a_first_grammar(app, db):
    corpus = import_bytes(
        db, b"the gulls circled\n", source="fresh.txt", corpus_name="Harbour", kind="text"
    )
    _add(db, corpus.corpus_id)
    v = training.run_training(app.state.sessionmaker, corpus.corpus_id, reason="test")
    assert v.status == GV_READY and v.training_size == 0 and v.heldout_f1 is None
    assert v.options["reference_trees"] == 3


@pytest.mark.parametrize("gold, expected", [(0, 10), (199, 10), (200, 25), (5000, 25)])
def test_retrain_interval_is_shorter_while_gold_is_scarce(gold, expected):
    assert training.retrain_interval(CorpusSettings(), gold) == expected


def test_retrain_interval_keeps_off_and_smaller_settings():
    assert training.retrain_interval(CorpusSettings(retrain_every=0), 5) == 0
    assert training.retrain_interval(CorpusSettings(retrain_every=3), 5) == 3
    assert training.retrain_interval(CorpusSettings(retrain_every_early=0), 5) == 25


# "fish eat people": one tree (entropy 0); "... with fish": two (0.655 nats); "... with fish
# with people": five, the largest per word. The grammar is the parser tests' hand-checked one.
LINES = ["fish eat people", "fish eat people with fish with people", "fish eat people with fish"]


def test_queue_informative_first_follows_the_entropy(db, people):
    made = import_bytes(
        db, ("\n".join(LINES) + "\n").encode(), source="fish.txt", corpus_name="Fish", kind="text"
    )
    corpus_id = made.corpus_id
    assign_sentences(db, corpus_id, per_sentence=2, usernames=["ann1", "ann2"])
    db.commit()
    ranked = training.rank_open_sentences(db, corpus_id, 0, SMALL)
    assert ranked == 3
    rows = {s.text: s.entropy_per_word for s in db.scalars(select(Sentence))}
    assert rows["fish eat people"] == pytest.approx(0.0, abs=1e-6)
    by_hand = -(7 / 11 * math.log(7 / 11) + 4 / 11 * math.log(4 / 11)) / 5
    assert rows["fish eat people with fish"] == pytest.approx(by_hand, abs=1e-6)
    document_order = [it.text for it in queue_page(db, people.ann1).items]
    assert document_order == LINES
    update_corpus(db, db.get(Corpus, corpus_id), settings={"queue_order": "informative"})
    db.commit()
    by_entropy = sorted(LINES, key=lambda t: -rows[t])
    assert by_entropy != LINES
    assert [it.text for it in queue_page(db, people.ann1).items] == by_entropy
    # both annotators of each sentence meet it at the same place
    assert [it.text for it in queue_page(db, people.ann2).items] == by_entropy
    first = queue_page(db, people.ann2).items[0].sentence_id
    assert queue_place(db, people.ann2, first).index == 1
    # back to document order
    update_corpus(db, db.get(Corpus, corpus_id), settings={"queue_order": "document"})
    db.commit()
    assert [it.text for it in queue_page(db, people.ann1).items] == LINES


def test_queue_informative_orders_new_assignments_too(db, people):
    made = import_bytes(
        db, ("\n".join(LINES) + "\n").encode(), source="fish.txt", corpus_name="Fish", kind="text"
    )
    update_corpus(db, db.get(Corpus, made.corpus_id), settings={"queue_order": "informative"})
    training.rank_open_sentences(db, made.corpus_id, 0, SMALL)
    assign_sentences(db, made.corpus_id, per_sentence=2, usernames=["ann1", "ann2"])
    db.commit()
    texts = [it.text for it in queue_page(db, people.ann1).items]
    assert texts[0] == "fish eat people with fish with people"
    assert texts[-1] == "fish eat people"


def test_grammars_page_adds_and_lists_reference_sets(app, db, people, login):
    corpus = import_demo_gold(db, settings={"retrain_every": 0})
    admin = login("admin")
    resp = admin.client.post(
        "/grammars/reference",
        data={
            "corpus_id": corpus.id,
            "csrf_token": admin.csrf,
            "name": "harbour notes",
            "source": "older team notes",
            "licence": LICENCE,
        },
        files={"upload": ("older.ptb", OLDER, "text/plain")},
    )
    assert resp.status_code == 200, resp.text
    assert "Reference set harbour notes added: 3 trees" in resp.text
    assert LICENCE in resp.text and "older team notes" in resp.text
    bad = admin.client.post(
        "/grammars/reference",
        data={
            "corpus_id": corpus.id,
            "csrf_token": admin.csrf,
            "name": "broken",
            "licence": LICENCE,
        },
        files={"upload": ("bad.ptb", b"(ROOT (S (NN a)\n", "text/plain")},
    )
    assert bad.status_code == 422 and "Nothing was added" in bad.text and "bad.ptb" in bad.text
    for queued in db.scalars(select(GrammarVersion.id)).all():  # the seed import's version
        wait_for_version(db, queued)
    v = training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    html = login("adj").client.get(f"/grammars?corpus={corpus.id}").text
    # each version says its weight and its reference sets; only admins get the upload form
    assert f'data-version="{v.id}"' in html and "harbour notes (3)" in html
    assert describe(DEFAULT) in html and 'action="/grammars/reference"' not in html
    # the learning curve has the reference-only start beside the version's point
    scored = [
        x
        for x in training.scored_versions(db, corpus.id)
        if training.reference_only_f1(x) is not None
    ]
    assert v.id in [x.id for x in scored]
    assert html.count('class="chart-dot chart-s1"') == len(scored)


def test_twelve_seed_gold_trees_queue_a_version_while_gold_is_scarce(db):
    # 12 gold trees: past retrain_every_early (10) while below early_gold_limit (200), though
    # short of retrain_every (25)
    trees = "".join(f"(ROOT (S (NP (NNS Gulls{i})) (VP (VBD circled)) (. .)))\n" for i in range(12))
    made = import_bytes(db, trees.encode(), source="seed.ptb", corpus_name="Harbour", kind="gold")
    queued = db.scalars(
        select(GrammarVersion).where(GrammarVersion.corpus_id == made.corpus_id)
    ).all()
    assert len(queued) == 1 and queued[0].options["reason"] == "10 new gold trees"
