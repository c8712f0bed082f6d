"""End to end through the JSON API: two annotators disagree, the agreement record holds the
hand-worked F1, the adjudicator settles, the gold export has the settled tree, and after
``retrain_every`` new gold trees the grammar version goes up and a fresh sentence's
suggestion changes. Reopening keeps the earlier gold in the history.

The corpus is seeded with the demo's invented ferry-cooperative gold; the new sentences are
invented too.
"""

from __future__ import annotations

import pytest
from sqlalchemy import select

from app.models import (
    GV_READY,
    SENT_GOLD,
    SENT_IN_REVIEW,
    AgreementRecord,
    Assignment,
    Corpus,
    Gold,
    GrammarVersion,
    Sentence,
    Suggestion,
)
from app.services import training
from app.services.exports import export_gold
from parser.trees import read_tree, write_tree
from tests.app.review_helpers import import_demo_gold, submit_tree, wait_for_version

OBJECTS = ["winch", "capstan", "windlass"]
FRESH = "grease the hinge before the crossing"


def tree_a(obj: str) -> str:
    # S(0,6) VP(0,6) NP(1,3) PP(3,6) NP(4,6): 5 constituents (ROOT and POS tags not counted)
    return (
        f"(ROOT (S (VP (VB grease) (NP (DT the) (NN {obj})) "
        "(PP (IN before) (NP (DT the) (NN crossing))))))"
    )


def tree_b(obj: str) -> str:
    # S(0,6) VP(0,6) NP(1,6) NP(1,3) PP(3,6) NP(4,6): 6 constituents; the PP under an NP
    return (
        f"(ROOT (S (VP (VB grease) (NP (NP (DT the) (NN {obj})) "
        "(PP (IN before) (NP (DT the) (NN crossing)))))))"
    )


@pytest.fixture
def flow(app, db, people, login):  # type: ignore[no-untyped-def]
    raw = "".join(f"grease the {o} before the crossing\n" for o in OBJECTS) + FRESH + "\n"
    # retrain after 3 new gold trees; max_f1_drop 1.0 so that version 2 is activated whatever
    # its held-out F1 on a 7-tree slice (rejection has its own tests in test_training_loop)
    corpus = import_demo_gold(
        db, "Saltmarrow review", raw=raw, settings={"retrain_every": 3, "max_f1_drop": 1.0}
    )
    sentences = {
        s.text: s
        for s in db.scalars(
            select(Sentence).where(Sentence.corpus_id == corpus.id, Sentence.state == "queued")
        )
    }
    for obj in OBJECTS:
        for user in (people.ann1, people.ann2):
            db.add(
                Assignment(
                    sentence_id=sentences[f"grease the {obj} before the crossing"].id,
                    user_id=user.id,
                )
            )
    # the fresh sentence comes last in ann1's queue: the refresh after each version parses
    # the annotators' next sentences (app.services.refresh), so it gets each version's
    db.add(Assignment(sentence_id=sentences[FRESH].id, user_id=people.ann1.id))
    db.commit()
    v1 = training.run_training(app.state.sessionmaker, corpus.id, reason="seed")
    assert v1.status == GV_READY and v1.training_size == 75
    return corpus, sentences, v1


def test_disagree_settle_export_retrain(app, db, login, flow):
    corpus, sentences, v1 = flow
    ann1, ann2, adj = login("ann1"), login("ann2"), login("adj")
    fresh = sentences[FRESH]
    before = db.scalar(
        select(Suggestion).where(
            Suggestion.sentence_id == fresh.id, Suggestion.grammar_version_id == v1.id
        )
    )
    assert before is not None  # the v1 refresh cached it: next in ann1's queue, unstarted
    # kept as text: once v2 is active, v1's suggestions of unstarted sentences are pruned
    before_best = before.trees[0]

    settled_texts = []
    for i, obj in enumerate(OBJECTS):
        s = sentences[f"grease the {obj} before the crossing"]
        submit_tree(ann1, s.id, tree_a(obj))
        submit_tree(ann2, s.id, tree_b(obj))
        db.expire_all()
        assert db.get(Sentence, s.id).state == SENT_IN_REVIEW
        [rec] = db.scalars(select(AgreementRecord).where(AgreementRecord.sentence_id == s.id))
        # all 5 constituents of A are in B: matched 5, A 5, B 6
        assert (rec.matched, rec.count_a, rec.count_b) == (5, 5, 6)
        assert rec.labelled_f1 == pytest.approx(10 / 11)  # 2*5 / (5+6)
        assert rec.labelled_precision == pytest.approx(5 / 6)  # B against A
        assert rec.labelled_recall == pytest.approx(1.0)

        seen = adj.client.get(f"/api/review/{s.id}")
        assert seen.status_code == 200, seen.text
        body = seen.json()
        assert [(t["letter"], t["annotator"]) for t in body["trees"]] == [
            ("A", "Ann1"),
            ("B", "Ann2"),
        ]
        kinds = {(c["start"], c["end"]): c["kind"] for c in body["combined"]}
        assert kinds[(1, 6)] == "some" and kinds[(1, 3)] == "all"
        source = body["trees"][0]["annotation_id"]
        done = adj.client.post(
            f"/api/review/{s.id}/settle",
            json={
                "tree": body["trees"][0]["tree"],
                "source_annotation_id": source,
                "note": f"PP attaches to the verb ({i + 1})",
            },
            headers=adj.headers(),
        )
        assert done.status_code == 200, done.text
        assert done.json()["state"] == SENT_GOLD
        [g] = done.json()["history"]
        assert g["provenance"] == "adjudication" and g["adjudicator"] == "Adj"
        assert g["source_letter"] == "A" and g["note"].startswith("PP attaches")
        settled_texts.append(write_tree(read_tree(tree_a(obj))))

    exported = export_gold(db, corpus.id).files
    [text] = exported.values()
    for t in settled_texts:
        assert t in text.splitlines()

    # the third settle made 3 new gold trees: version 2 is queued and trains in the background
    db.expire_all()
    v2 = db.scalar(
        select(GrammarVersion).where(
            GrammarVersion.corpus_id == corpus.id, GrammarVersion.number == 2
        )
    )
    assert v2 is not None
    v2 = wait_for_version(db, v2.id)
    assert v2.status == GV_READY, v2.message
    assert v2.training_size == 78
    assert db.get(Corpus, corpus.id).active_grammar_id == v2.id
    after = db.scalar(
        select(Suggestion).where(
            Suggestion.sentence_id == fresh.id, Suggestion.grammar_version_id == v2.id
        )
    )
    assert after is not None
    # v1 had never seen "grease"; v2 learned the three settled trees
    assert after.trees[0] != before_best
    assert (
        db.scalar(
            select(Suggestion).where(
                Suggestion.sentence_id == fresh.id, Suggestion.grammar_version_id == v1.id
            )
        )
        is None
    )
    assert after.trees[0] == write_tree(read_tree(tree_a("hinge")))


def test_reopen_keeps_history_and_a_new_settle_replaces_the_export(app, db, login, flow):
    corpus, sentences, _ = flow
    ann1, ann2, adj = login("ann1"), login("ann2"), login("adj")
    s = sentences["grease the winch before the crossing"]
    submit_tree(ann1, s.id, tree_a("winch"))
    submit_tree(ann2, s.id, tree_b("winch"))
    first = adj.client.post(
        f"/api/review/{s.id}/settle", json={"tree": tree_a("winch")}, headers=adj.headers()
    )
    assert first.status_code == 200, first.text
    # settling twice is refused: the sentence is gold now
    twice = adj.client.post(
        f"/api/review/{s.id}/settle", json={"tree": tree_b("winch")}, headers=adj.headers()
    )
    assert twice.status_code == 409
    reopened = adj.client.post(
        f"/api/review/{s.id}/reopen", json={"note": "check the PP"}, headers=adj.headers()
    )
    assert reopened.status_code == 200, reopened.text
    assert reopened.json()["state"] == SENT_IN_REVIEW
    [old] = reopened.json()["history"]
    assert old["retired_at"] is not None and old["retired_by"] == "Adj"
    db.expire_all()
    assert tree_a("winch") not in "".join(export_gold(db, corpus.id).files.values())
    second = adj.client.post(
        f"/api/review/{s.id}/settle",
        json={
            "tree": tree_b("winch"),
            "source_gold_id": old["gold_id"],
            "note": "the PP modifies the noun after all",
        },
        headers=adj.headers(),
    )
    assert second.status_code == 200, second.text
    hist = second.json()["history"]
    assert [h["retired_at"] is None for h in hist] == [True, False]  # newest first
    golds = db.scalars(select(Gold).where(Gold.sentence_id == s.id).order_by(Gold.id)).all()
    assert [g.tree for g in golds] == [
        write_tree(read_tree(tree_a("winch"))),
        write_tree(read_tree(tree_b("winch"))),
    ]
    lines = "".join(export_gold(db, corpus.id).files.values()).splitlines()
    assert write_tree(read_tree(tree_b("winch"))) in lines
    assert write_tree(read_tree(tree_a("winch"))) not in lines


def test_settle_refuses_a_tree_with_other_words(app, db, login, flow):
    corpus, sentences, _ = flow
    s = sentences["grease the winch before the crossing"]
    submit_tree(login("ann1"), s.id, tree_a("winch"))
    submit_tree(login("ann2"), s.id, tree_b("winch"))
    adj = login("adj")
    bad = adj.client.post(
        f"/api/review/{s.id}/settle", json={"tree": tree_a("capstan")}, headers=adj.headers()
    )
    assert bad.status_code == 422 and bad.json()["kind"] == "words"
    broken = adj.client.post(
        f"/api/review/{s.id}/check", json={"tree": "(ROOT (S (VB x)"}, headers=adj.headers()
    )
    assert broken.status_code == 422 and broken.json()["kind"] == "brackets"
    assert "line 1, column" in broken.json()["detail"]
    db.expire_all()
    assert db.get(Sentence, s.id).state == SENT_IN_REVIEW


def test_source_must_belong_to_the_sentence(app, db, login, flow):
    corpus, sentences, _ = flow
    s1 = sentences["grease the winch before the crossing"]
    s2 = sentences["grease the capstan before the crossing"]
    ann1, ann2, adj = login("ann1"), login("ann2"), login("adj")
    for s, obj in ((s1, "winch"), (s2, "capstan")):
        submit_tree(ann1, s.id, tree_a(obj))
        submit_tree(ann2, s.id, tree_b(obj))
    other = adj.client.get(f"/api/review/{s2.id}").json()["trees"][0]["annotation_id"]
    resp = adj.client.post(
        f"/api/review/{s1.id}/settle",
        json={"tree": tree_a("winch"), "source_annotation_id": other},
        headers=adj.headers(),
    )
    assert resp.status_code == 422 and resp.json()["kind"] == "source"


def test_annotators_cannot_review(app, db, login, flow):
    corpus, sentences, _ = flow
    s = sentences["grease the winch before the crossing"]
    ann = login("ann1")
    assert ann.client.get(f"/api/review/{s.id}").status_code == 403
    assert (
        ann.client.post(
            f"/api/review/{s.id}/settle", json={"tree": tree_a("winch")}, headers=ann.headers()
        ).status_code
        == 403
    )
    assert ann.client.get("/api/review").status_code == 403
    page = ann.client.get(f"/review/{s.id}", headers={"accept": "text/html"})
    assert page.status_code == 403


def test_settle_without_csrf_is_refused(app, db, login, flow):
    corpus, sentences, _ = flow
    s = sentences["grease the winch before the crossing"]
    adj = login("adj")
    resp = adj.client.post(f"/api/review/{s.id}/settle", json={"tree": tree_a("winch")})
    assert resp.status_code == 403
