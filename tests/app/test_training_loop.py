"""The gold loop: training a grammar version on a corpus's gold, scoring it on a held-out
slice, activating or rejecting it, queueing when enough new gold arrived, the background
runner and the Grammars API.

Gold comes from the demo corpus's hand-bracketed trees (app/demo/gold_*.ptb, an invented
ferry cooperative), imported as seed gold.
"""

from __future__ import annotations

import os

import pytest
from sqlalchemy import select

from app.models import (
    GV_FAILED,
    GV_QUEUED,
    GV_READY,
    GV_REJECTED,
    Assignment,
    Corpus,
    Gold,
    GrammarVersion,
    Sentence,
    Suggestion,
)
from app.services import training
from app.services.suggestions import grammar_from_bytes
from parser.chart import parse
from parser.grammar import DEFAULT_HORIZONTAL, DEFAULT_MIN_CONTEXT, DEFAULT_VERTICAL
from parser.trees import read_tree, words
from tests.app.review_helpers import import_demo_gold, wait_for_version


def test_run_training_scores_a_heldout_slice_and_activates(app, db):
    corpus = import_demo_gold(db)
    gold_ids = sorted(db.scalars(select(Gold.sentence_id)).all())
    v = training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    assert v.status == GV_READY and v.number == 1
    assert v.training_size == len(gold_ids) == 75
    # held out: sentences whose id is a multiple of heldout_every (default 10)
    assert v.heldout_size == sum(1 for i in gold_ids if i % 10 == 0) > 0
    assert v.options["slice_size"] == v.training_size - v.heldout_size
    assert 0.0 < v.heldout_f1 <= 1.0
    assert v.options["heldout"]["sentences"] == v.heldout_size
    # the F1 carries its bootstrap interval and the per-sentence counts of the sample
    held = v.options["heldout"]
    assert held["ci_low"] <= v.heldout_f1 <= held["ci_high"]
    assert len(held["per_sentence"]) == v.heldout_size
    assert "bootstrap" in held["ci_method"]
    # the library's default markovization, recorded with the version
    assert v.options["markovization"] == {
        "horizontal": DEFAULT_HORIZONTAL,
        "vertical": DEFAULT_VERTICAL,
        "min_context": DEFAULT_MIN_CONTEXT,
    }
    assert v.train_seconds is not None and v.finished_at is not None and v.progress == 1.0
    db.expire_all()
    assert db.get(Corpus, corpus.id).active_grammar_id == v.id
    # the stored grammar is trained on all gold: it parses a held-out sentence's words
    stored = db.scalar(select(GrammarVersion).where(GrammarVersion.id == v.id))
    grammar = grammar_from_bytes(stored.data)
    held = db.scalar(select(Gold).where(Gold.sentence_id == gold_ids[0]))
    assert words(parse(grammar, words(read_tree(held.tree))).trees[0]) == words(
        read_tree(held.tree)
    )


def test_heldout_slice_is_keyed_on_sentence_ids():
    from nltk import Tree

    gold = [training.GoldTree(i, Tree("ROOT", [Tree("NN", ["w"])])) for i in range(1, 31)]
    train, held = training.split_heldout(gold, 10)
    assert [g.sentence_id for g in held] == [10, 20, 30]
    assert len(train) == 27
    # growing the gold keeps the earlier held-out sentences held out
    _, held_more = training.split_heldout(gold + [training.GoldTree(40, gold[0].tree)], 10)
    assert [g.sentence_id for g in held_more] == [10, 20, 30, 40]
    assert training.split_heldout(gold[:5], 10) == (gold[:5], [])  # ids 1..5: nothing to hold


def test_roots_are_normalised_for_training():
    assert training.rooted(read_tree("( (S (NN a)))")).label() == "ROOT"
    assert str(training.rooted(read_tree("(S (NN a))"))) == "(ROOT (S (NN a)))"
    t = read_tree("(ROOT (S (NN a)))")
    assert training.rooted(t) is t


@pytest.mark.parametrize("max_drop, expected", [(0.01, GV_REJECTED), (1.0, GV_READY)])
def test_activation_depends_on_the_f1_drop_allowed(app, db, max_drop, expected):
    corpus = import_demo_gold(db, settings={"max_f1_drop": max_drop})
    first = training.run_training(app.state.sessionmaker, corpus.id, reason="first")
    # pretend the active version scored almost perfectly; the next (same gold) cannot match
    db.get(GrammarVersion, first.id).heldout_f1 = 0.999
    db.commit()
    second = training.run_training(app.state.sessionmaker, corpus.id, reason="second")
    assert second.number == 2 and second.status == expected
    db.expire_all()
    active = db.get(Corpus, corpus.id).active_grammar_id
    if expected == GV_REJECTED:
        assert "rejected" in second.message and active == first.id
        # a rejected grammar is still stored: nothing is thrown away
        assert db.scalar(select(GrammarVersion).where(GrammarVersion.id == second.id)).data
    else:
        assert active == second.id


def test_training_without_gold_fails_into_the_row(app, db):
    corpus = Corpus(name="Empty", settings={})
    db.add(corpus)
    db.commit()
    v = training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    assert v.status == GV_FAILED and "no gold" in v.message


def test_gold_import_queues_a_version_once_retrain_every_is_reached(app, db):
    # three files of 25 seed gold each; the first file reaches the default retrain_every 25
    corpus = import_demo_gold(db)
    [queued] = db.scalars(select(GrammarVersion)).all()
    assert queued.status == GV_QUEUED and queued.gold_count_at_start == 25
    # a second due-check while one is open queues nothing
    assert training.queue_if_due(db, db.get(Corpus, corpus.id)) is None
    assert len(db.scalars(select(GrammarVersion)).all()) == 1


def test_refresh_after_training_fills_the_annotators_next_sentences_only(app, db, people):
    corpus = import_demo_gold(
        db,
        raw="Grease the winch .\nCheck the ramp .\nPaint the rail .\n",
        settings={"refresh_lookahead": 2},
    )
    raw_ids = db.scalars(
        select(Sentence.id)
        .where(Sentence.corpus_id == corpus.id, Sentence.state == "queued")
        .order_by(Sentence.id)
    ).all()
    for sid in raw_ids:
        db.add(Assignment(sentence_id=sid, user_id=people.ann1.id))
    db.commit()
    v = training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    cached = set(
        db.scalars(
            select(Suggestion.sentence_id).where(Suggestion.grammar_version_id == v.id)
        ).all()
    )
    # the look-ahead of the one annotator's queue; the third is parsed when opened
    assert cached == set(raw_ids[:2])
    assert v.options["refresh"]["parsed"] == 2 and v.options["refresh"]["budget"] >= 2


def test_api_train_now_runs_in_the_background_and_reports_progress(app, db, login):
    corpus = import_demo_gold(db, settings={"retrain_every": 0})
    adj = login("adj")
    resp = adj.client.post("/api/grammars", json={"corpus_id": corpus.id}, headers=adj.headers())
    assert resp.status_code == 202, resp.text
    body = resp.json()
    assert body["number"] == 1 and body["status"] in ("queued", "training", "ready")
    again = adj.client.post("/api/grammars", json={"corpus_id": corpus.id}, headers=adj.headers())
    # one job per corpus: asking again while it is open gives the same job
    if again.json()["status"] in ("queued", "training"):
        assert again.json()["id"] == body["id"]
    v = wait_for_version(db, body["id"])
    assert v.status == GV_READY
    polled = adj.client.get(f"/api/grammars/{body['id']}").json()
    assert polled["status"] == "ready" and polled["active"] is True
    assert polled["progress"] == 1.0 and polled["heldout_f1"] == pytest.approx(v.heldout_f1)
    assert polled["heldout_f1_low"] <= polled["heldout_f1"] <= polled["heldout_f1_high"]
    assert polled["heldout_scored"] == v.heldout_size  # fewer than the sample's bound
    listed = adj.client.get(f"/api/grammars?corpus_id={corpus.id}").json()
    assert [x["number"] for x in listed][0] == polled["number"]


def test_annotators_cannot_start_training(app, db, login):
    corpus = import_demo_gold(db)
    ann = login("ann1")
    resp = ann.client.post("/api/grammars", json={"corpus_id": corpus.id}, headers=ann.headers())
    assert resp.status_code == 403


def test_process_runner_trains_outside_the_web_process(app, db):
    corpus = import_demo_gold(db, settings={"retrain_every": 0})
    runner = training.get_runner(app.state.sessionmaker, in_process=False)
    try:
        v = training.schedule_training(app.state.sessionmaker, corpus.id, "test")
        done = wait_for_version(db, v.id, timeout=300)
        assert done.status == GV_READY, done.message
        assert done.options["worker_pid"] != os.getpid()
    finally:
        runner.shutdown(wait=True)
