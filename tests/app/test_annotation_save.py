"""Bench saves: start tree, append-only revisions, stale saves answered 409, reload."""

from __future__ import annotations

from sqlalchemy import func, select

from app.models import Annotation, Revision, Sentence
from tests.app.bench_helpers import assign, flat_text, make_corpus


def _setup(db, people):
    corpus, sentences = make_corpus(db)
    assign(db, sentences, people.ann1, people.ann2)
    return corpus, sentences


def _save(me, sid, base, tree, **extra):
    return me.client.post(
        f"/api/bench/{sid}/revisions",
        headers=me.headers(),
        json={"base": base, "tree": tree, **extra},
    )


def test_annotation_new_sentence_starts_flat_without_grammar(db, people, login) -> None:
    _, sentences = _setup(db, people)
    me = login("ann1")
    resp = me.client.get(f"/api/bench/{sentences[0].id}")
    assert resp.status_code == 200, resp.text
    body = resp.json()
    assert body["source"] == "flat"
    assert "No grammar" in body["start_note"]
    assert body["annotation"]["head"] == 0 and body["annotation"]["id"] is None
    assert body["suggestion"] is None
    assert body["tree"].startswith("(ROOT (S (XX The) (XX port)")
    assert body["editable"] is True
    assert body["queue"] == {
        "index": 1,
        "total": 4,
        "submitted": 0,
        "prev_id": None,
        "next_id": sentences[1].id,
        "next_open_id": sentences[1].id,
    }


def test_annotation_saves_append_revisions_and_reload_returns_newest(db, people, login) -> None:
    _, sentences = _setup(db, people)
    s = sentences[1]
    me = login("ann1")
    tokens = s.tokens
    first = flat_text(tokens)
    second = (
        "(ROOT (S (VP (VB Check) (NP (DT the) (NN bilge) (NN pump)) (PP (IN before) "
        "(NP (DT the) (JJ first) (NN crossing)))) (. .)))"
    )
    r1 = _save(me, s.id, 0, first, source="flat")
    assert r1.status_code == 201, r1.text
    assert r1.json()["revision"]["number"] == 1
    r2 = _save(me, s.id, 1, second, pins={"spans": [[1, 4, "NP"]], "tags": [[0, "VB"]]})
    assert r2.status_code == 201, r2.text
    assert r2.json()["annotation"]["head"] == 2
    db.expire_all()
    revs = db.scalars(select(Revision).order_by(Revision.number)).all()
    assert [r.number for r in revs] == [1, 2]
    assert revs[0].tree == first and revs[0].source == "flat"
    assert revs[1].tree == second and revs[1].pins == {"spans": [[1, 4, "NP"]], "tags": [[0, "VB"]]}
    assert db.get(Sentence, s.id).state == "in_progress"
    back = me.client.get(f"/api/bench/{s.id}").json()
    assert back["tree"] == second and back["source"] == "edit"
    assert back["pins"] == {
        "spans": [[1, 4, "NP"]],
        "tags": [[0, "VB"]],
        "edited_spans": [],
        "edited_tags": [],
        "removed_spans": [],
    }
    assert back["annotation"]["head"] == 2 and back["start_note"] is None


def test_annotation_stale_save_gets_409_with_current_and_writes_nothing(db, people, login) -> None:
    _, sentences = _setup(db, people)
    s = sentences[0]
    me = login("ann1")
    tree_a = flat_text(s.tokens)
    tree_b = flat_text(s.tokens, ["DT", "NN", "NN", "VBD", "VBN", "IN", "DT", "NN", "NN", "."])
    assert _save(me, s.id, 0, tree_a).status_code == 201
    assert _save(me, s.id, 1, tree_b).status_code == 201
    # a second tab still based on revision 1
    stale = _save(me, s.id, 1, tree_a)
    assert stale.status_code == 409
    body = stale.json()
    assert body["head"] == 2
    assert body["current"]["number"] == 2 and body["current"]["tree"] == tree_b
    assert "revision 1" in body["detail"] and "revision 2" in body["detail"]
    db.expire_all()
    assert db.scalar(select(func.count()).select_from(Revision)) == 2
    # keep mine: the same tree saved on top of the current head is accepted
    ok = _save(me, s.id, 2, tree_a)
    assert ok.status_code == 201 and ok.json()["revision"]["number"] == 3


def test_annotation_first_save_must_be_based_on_zero(db, people, login) -> None:
    _, sentences = _setup(db, people)
    me = login("ann1")
    resp = _save(me, sentences[0].id, 3, flat_text(sentences[0].tokens))
    assert resp.status_code == 409
    assert resp.json()["current"] is None and resp.json()["head"] == 0
    assert db.scalar(select(func.count()).select_from(Annotation)) == 0


def test_annotation_race_on_same_number_loses_with_409(db, people, login) -> None:
    """The unique (annotation, number) pair stops a save whose head check raced past."""
    from app.services import annotation as svc

    _, sentences = _setup(db, people)
    s = sentences[0]
    me = login("ann1")
    assert _save(me, s.id, 0, flat_text(s.tokens)).status_code == 201
    ann = db.scalar(select(Annotation))
    # Simulate the loser of a race: a revision 2 exists while head still says 1.
    db.add(
        Revision(
            annotation_id=ann.id,
            number=2,
            tree=flat_text(s.tokens),
            pins={},
            source="edit",
            user_id=people.ann1.id,
        )
    )
    db.commit()
    import pytest

    from app.services.errors import Conflict

    with pytest.raises(Conflict) as err:
        svc.save_revision(
            db, people.ann1, db.get(Sentence, s.id), base=1, tree_text=flat_text(s.tokens)
        )
    assert err.value.status_code == 409
    db.expire_all()
    assert db.get(Annotation, ann.id).head == 1


def test_annotation_saved_tree_is_canonical_one_line(db, people, login) -> None:
    _, sentences = _setup(db, people)
    s = sentences[3]
    me = login("ann1")
    text = (
        "(ROOT\n  (SBARQ (WHNP (WP Who))\n    (SQ (VP (VBD signed) (PRT (RP off))\n"
        "      (NP (DT the) (NN ramp) (NN inspection))))\n    (. ?)))"
    )
    resp = _save(me, s.id, 0, text, source="text")
    assert resp.status_code == 201, resp.text
    stored = resp.json()["revision"]["tree"]
    assert "\n" not in stored
    assert stored == (
        "(ROOT (SBARQ (WHNP (WP Who)) (SQ (VP (VBD signed) (PRT (RP off)) "
        "(NP (DT the) (NN ramp) (NN inspection)))) (. ?)))"
    )


def test_annotation_history_lists_only_ones_own_revisions_newest_first(db, people, login) -> None:
    _, sentences = _setup(db, people)
    s = sentences[1]
    ann1, ann2 = login("ann1"), login("ann2")
    flat = flat_text(s.tokens)
    assert ann1.client.get(f"/api/bench/{s.id}/revisions").json() == []
    assert _save(ann1, s.id, 0, flat, source="flat").status_code == 201
    assert _save(ann2, s.id, 0, flat, source="flat").status_code == 201
    assert _save(ann1, s.id, 1, flat, source="restore").status_code == 201
    mine = ann1.client.get(f"/api/bench/{s.id}/revisions").json()
    assert [(r["number"], r["source"]) for r in mine] == [(2, "restore"), (1, "flat")]
    theirs = ann2.client.get(f"/api/bench/{s.id}/revisions").json()
    assert [(r["number"], r["source"]) for r in theirs] == [(1, "flat")]
    other = login("admin").client.get(f"/api/bench/{s.id}/revisions")
    assert other.status_code == 404  # not in the admin's queue
