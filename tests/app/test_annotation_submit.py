"""Submit, notes and flags; the agreement hook runs when both annotators are in."""

from __future__ import annotations

from sqlalchemy import select

from app.models import AgreementRecord, Annotation, Event, Gold, Sentence
from tests.app.bench_helpers import assign, flat_text, make_corpus

TAGS0 = ["DT", "NN", "NN", "VBD", "VBN", "IN", "DT", "NN", "NN", "."]


def _world(db, people):
    _, sentences = make_corpus(db)
    assign(db, sentences, people.ann1, people.ann2)
    return sentences


def _save(me, sid, base, tree):
    return me.client.post(
        f"/api/bench/{sid}/revisions", headers=me.headers(), json={"base": base, "tree": tree}
    )


def _submit(me, sid, base):
    return me.client.post(f"/api/bench/{sid}/submit", headers=me.headers(), json={"base": base})


def test_annotation_submit_needs_a_saved_tree(db, people, login) -> None:
    s = _world(db, people)[0]
    me = login("ann1")
    resp = _submit(me, s.id, 0)
    assert resp.status_code == 422 and resp.json()["kind"] == "state"


def test_annotation_submit_with_stale_base_is_409(db, people, login) -> None:
    s = _world(db, people)[0]
    me = login("ann1")
    _save(me, s.id, 0, flat_text(s.tokens))
    _save(me, s.id, 1, flat_text(s.tokens, TAGS0))
    resp = _submit(me, s.id, 1)
    assert resp.status_code == 409 and resp.json()["current"]["number"] == 2
    db.expire_all()
    assert db.scalar(select(Annotation)).state == "draft"


def test_annotation_submitted_takes_no_more_saves(db, people, login) -> None:
    s = _world(db, people)[0]
    me = login("ann1")
    _save(me, s.id, 0, flat_text(s.tokens, TAGS0))
    resp = _submit(me, s.id, 1)
    assert resp.status_code == 200, resp.text
    assert resp.json()["state"] == "submitted" and resp.json()["submitted_at"]
    later = _save(me, s.id, 1, flat_text(s.tokens))
    assert later.status_code == 409 and "submitted" in later.json()["detail"]
    again = _submit(me, s.id, 1)
    assert again.status_code == 409
    bench = me.client.get(f"/api/bench/{s.id}").json()
    assert bench["editable"] is False and bench["annotation"]["state"] == "submitted"
    db.expire_all()
    assert db.scalar(select(Event).where(Event.kind == "annotation.submitted")) is not None


def test_annotation_two_identical_submissions_become_gold(db, people, login) -> None:
    s = _world(db, people)[0]
    tree = flat_text(s.tokens, TAGS0)
    for name in ("ann1", "ann2"):
        me = login(name)
        assert _save(me, s.id, 0, tree).status_code == 201
        assert _submit(me, s.id, 1).status_code == 200
    db.expire_all()
    assert db.get(Sentence, s.id).state == "gold"
    assert db.scalar(select(Gold).where(Gold.sentence_id == s.id)).tree == tree
    record = db.scalar(select(AgreementRecord))
    assert record.identical and record.labelled_f1 == 1.0


def test_annotation_differing_submissions_go_to_review(db, people, login) -> None:
    s = _world(db, people)[0]
    one, two = login("ann1"), login("ann2")
    _save(one, s.id, 0, flat_text(s.tokens, TAGS0))
    assert _submit(one, s.id, 1).status_code == 200
    db.expire_all()
    assert db.get(Sentence, s.id).state == "in_progress"  # waits for the second annotator
    other = (
        "(ROOT (S (NP (DT The) (NN port) (NN engine)) (VP (VBD was) (VBN stopped) "
        "(PP (IN for) (NP (DT an) (NN oil) (NN change)))) (. .)))"
    )
    _save(two, s.id, 0, other)
    assert _submit(two, s.id, 1).status_code == 200
    db.expire_all()
    assert db.get(Sentence, s.id).state == "in_review"
    assert db.scalar(select(AgreementRecord)).identical is False


def test_annotation_flag_holds_back_and_can_be_released(db, people, login) -> None:
    s = _world(db, people)[1]
    me = login("ann1")
    resp = me.client.patch(
        f"/api/bench/{s.id}/note",
        headers=me.headers(),
        json={"flag": "tokenization wrong", "comment": "'bilge pump' should be one token?"},
    )
    assert resp.status_code == 200, resp.text
    body = resp.json()
    assert body["state"] == "flagged" and body["flag"] == "tokenization wrong"
    assert body["comment"] == "'bilge pump' should be one token?"
    assert body["head"] == 0  # a note needs no saved tree
    queue = me.client.get("/api/queue").json()
    item = next(it for it in queue["items"] if it["sentence_id"] == s.id)
    assert item["annotation_state"] == "flagged" and item["flag"] == "tokenization wrong"
    # saving still works on a flagged annotation and keeps the flag
    ok = _save(me, s.id, 0, flat_text(s.tokens))
    assert ok.status_code == 201 and ok.json()["annotation"]["state"] == "flagged"
    released = me.client.patch(
        f"/api/bench/{s.id}/note", headers=me.headers(), json={"clear_flag": True}
    )
    assert released.json()["state"] == "draft" and released.json()["flag"] is None
    assert released.json()["comment"] == "'bilge pump' should be one token?"


def test_annotation_bad_notes_are_refused(db, people, login) -> None:
    s = _world(db, people)[1]
    me = login("ann1")
    url = f"/api/bench/{s.id}/note"
    assert me.client.patch(url, headers=me.headers(), json={"flag": "  "}).status_code == 422
    assert me.client.patch(url, headers=me.headers(), json={"flag": "x" * 65}).status_code == 422
    assert (
        me.client.patch(url, headers=me.headers(), json={"comment": "x" * 4001}).status_code == 422
    )


def test_annotation_queue_progress_and_neighbours(db, people, login) -> None:
    sentences = _world(db, people)
    me = login("ann1")
    _save(me, sentences[0].id, 0, flat_text(sentences[0].tokens, TAGS0))
    _submit(me, sentences[0].id, 1)
    me.client.patch(
        f"/api/bench/{sentences[1].id}/note", headers=me.headers(), json={"flag": "not a sentence"}
    )
    queue = me.client.get("/api/queue").json()
    assert (queue["submitted"], queue["total"]) == (1, 4)
    assert [it["annotation_state"] for it in queue["items"]] == ["submitted", "flagged", None, None]
    place = me.client.get(f"/api/bench/{sentences[1].id}").json()["queue"]
    assert place == {
        "index": 2,
        "total": 4,
        "submitted": 1,
        "prev_id": sentences[0].id,
        "next_id": sentences[2].id,
        "next_open_id": sentences[2].id,
    }
    last = me.client.get(f"/api/bench/{sentences[3].id}").json()["queue"]
    assert last["next_id"] is None and last["next_open_id"] == sentences[2].id


def test_annotation_sentence_in_review_or_gold_takes_no_more_saves(db, people, login) -> None:
    sentences = _world(db, people)
    s = sentences[2]
    me = login("ann1")
    assert _save(me, s.id, 0, flat_text(s.tokens)).status_code == 201
    for state in ("in_review", "gold"):
        db.get(Sentence, s.id).state = state
        db.commit()
        resp = _save(
            me, s.id, 1, flat_text(s.tokens, ["DT", "JJ", "NN", "VBZ", "RB", "VBN", "VBN", "."])
        )
        assert resp.status_code == 409 and state.replace("_", " ") in resp.json()["detail"]
        assert _submit(me, s.id, 1).status_code == 409
        assert me.client.get(f"/api/bench/{s.id}").json()["editable"] is False
