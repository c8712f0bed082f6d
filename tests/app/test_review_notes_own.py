"""Review: every annotator's note for the adjudicator reaches the Review page, its API and the
gold history; an adjudicator settling a sentence they annotated is decided by the corpus
setting ``settle_own_annotation`` and recorded in the gold history.

The sentence and trees are the invented ferry example of tests/app/review_helpers.py.
"""

from __future__ import annotations

from sqlalchemy import select

from app.models import SENT_GOLD, SENT_IN_REVIEW, Gold, Sentence
from app.services.corpora import update_corpus
from tests.app.bench_helpers import assign, make_corpus
from tests.app.review_helpers import LABELS, SENTENCE, TAGS, TREE_A, TREE_B, submit_tree

NOTE_1 = "not sure whether 'at dawn' is a PP or an adverbial"
NOTE_2 = "took <at dawn> as an ADVP inside the object NP"


def _note(who, sentence_id: int, text: str) -> None:  # type: ignore[no-untyped-def]
    resp = who.client.patch(
        f"/api/bench/{sentence_id}/note", json={"comment": text}, headers=who.headers()
    )
    assert resp.status_code == 200, resp.text


def _disagreement(db, people, login, first="ann1", second="ann2"):  # type: ignore[no-untyped-def]
    corpus, [s] = make_corpus(db, [SENTENCE], labels=LABELS, tags=TAGS)
    by_name = {"ann1": people.ann1, "ann2": people.ann2, "adj": people.adjudicator}
    assign(db, [s], by_name[first], by_name[second])
    return corpus, s


def test_notes_show_beside_each_tree_in_the_api_and_the_page(db, people, login):
    corpus, s = _disagreement(db, people, login)
    ann1, ann2 = login("ann1"), login("ann2")
    _note(ann1, s.id, NOTE_1)
    submit_tree(ann1, s.id, TREE_A)
    submit_tree(ann2, s.id, TREE_B)
    _note(ann2, s.id, NOTE_2)  # a note may still come after handing in
    adj = login("adj")
    data = adj.client.get(f"/api/review/{s.id}").json()
    notes = {t["annotator"]: t["note"] for t in data["trees"]}
    assert notes == {"Ann1": NOTE_1, "Ann2": NOTE_2}
    html = adj.client.get(f"/review/{s.id}").text
    tree_a = html.split('id="tree-A"', 1)[1].split("</article>", 1)[0]
    tree_b = html.split('id="tree-B"', 1)[1].split("</article>", 1)[0]
    assert NOTE_1.replace("'", "&#39;") in tree_a and "Ann1" in tree_a
    assert "took &lt;at dawn&gt; as an ADVP" in tree_b  # text, not markup
    assert "took" not in tree_a


def test_gold_history_keeps_the_notes_the_decision_was_made_with(db, people, login):
    corpus, s = _disagreement(db, people, login)
    ann1, ann2 = login("ann1"), login("ann2")
    _note(ann1, s.id, NOTE_1)
    submit_tree(ann1, s.id, TREE_A)
    submit_tree(ann2, s.id, TREE_B)
    adj = login("adj")
    settled = adj.client.post(
        f"/api/review/{s.id}/settle", json={"tree": TREE_A}, headers=adj.headers()
    )
    assert settled.status_code == 200, settled.text
    _note(ann1, s.id, "changed my mind later")
    history = adj.client.get(f"/api/review/{s.id}").json()["history"]
    assert [(n["annotator"], n["note"]) for n in history[0]["annotator_notes"]] == [
        ("Ann1", NOTE_1)
    ]
    html = adj.client.get(f"/review/{s.id}").text
    section = html.split('id="rv-history-h"', 1)[1]
    assert "Ann1’s note:" in section and NOTE_1.replace("'", "&#39;") in section
    assert "changed my mind later" not in section


def test_own_annotation_is_refused_by_default_when_another_adjudicator_exists(db, people, login):
    corpus, s = _disagreement(db, people, login, "adj", "ann1")
    submit_tree(login("adj"), s.id, TREE_A)
    submit_tree(login("ann1"), s.id, TREE_B)
    adj = login("adj")
    refused = adj.client.post(
        f"/api/review/{s.id}/settle", json={"tree": TREE_A}, headers=adj.headers()
    )
    assert refused.status_code == 403
    assert refused.json()["kind"] == "own_annotation"
    assert "you annotated this sentence" in refused.json()["detail"]
    db.expire_all()
    assert db.get(Sentence, s.id).state == SENT_IN_REVIEW
    assert db.scalars(select(Gold).where(Gold.sentence_id == s.id)).all() == []
    # the admin is the other adjudicator and may settle it
    admin = login("admin")
    done = admin.client.post(
        f"/api/review/{s.id}/settle", json={"tree": TREE_A}, headers=admin.headers()
    )
    assert done.status_code == 200, done.text
    assert done.json()["history"][0]["own_annotation"] is False


def test_own_annotation_allowed_when_alone_and_recorded(db, people, login):
    corpus, s = _disagreement(db, people, login, "adj", "ann1")
    submit_tree(login("adj"), s.id, TREE_A)
    submit_tree(login("ann1"), s.id, TREE_B)
    adj = login("adj")
    people.admin.active = False  # now nobody else can adjudicate
    db.commit()
    done = adj.client.post(
        f"/api/review/{s.id}/settle", json={"tree": TREE_A}, headers=adj.headers()
    )
    assert done.status_code == 200, done.text
    assert done.json()["history"][0]["own_annotation"] is True
    db.expire_all()
    gold = db.scalar(select(Gold).where(Gold.sentence_id == s.id))
    assert gold is not None and gold.own_annotation and db.get(Sentence, s.id).state == SENT_GOLD
    html = adj.client.get(f"/review/{s.id}").text
    assert "the adjudicator had annotated this sentence" in html


def test_own_annotation_setting_always_and_never(db, people, login):
    corpus, s = _disagreement(db, people, login, "adj", "ann1")
    submit_tree(login("adj"), s.id, TREE_A)
    submit_tree(login("ann1"), s.id, TREE_B)
    adj = login("adj")
    people.admin.active = False
    update_corpus(db, corpus, settings={"settle_own_annotation": "never"})
    db.commit()
    never = adj.client.post(
        f"/api/review/{s.id}/settle", json={"tree": TREE_A}, headers=adj.headers()
    )
    assert never.status_code == 403 and "lets nobody settle" in never.json()["detail"]
    people.admin.active = True
    update_corpus(db, corpus, settings={"settle_own_annotation": "always"})
    db.commit()
    always = adj.client.post(
        f"/api/review/{s.id}/settle", json={"tree": TREE_B}, headers=adj.headers()
    )
    assert always.status_code == 200, always.text
    assert always.json()["history"][0]["own_annotation"] is True


def test_own_annotation_setting_takes_only_its_choices(db, people, login):
    corpus, _ = _disagreement(db, people, login)
    admin = login("admin")
    resp = admin.client.post(
        f"/corpora/{corpus.id}/settings",
        data={"csrf_token": admin.csrf, "settle_own_annotation": "sometimes"},
    )
    assert resp.status_code == 422
    assert "settle_own_annotation" in resp.text and "if_alone" in resp.text
    page = admin.client.get(f"/corpora/{corpus.id}").text
    assert 'name="settle_own_annotation"' in page
