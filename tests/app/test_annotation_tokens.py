"""Token fixes: a new version of the sentence's tokens with the old kept, the fixer's tree
carried over as a new revision, the other annotator's work kept on the earlier tokens and
carried when they come back, agreement only between trees on the same tokens."""

from __future__ import annotations

from sqlalchemy import select

from app.models import AgreementRecord, Annotation, Revision, Sentence, TokenVersion
from tests.app.bench_helpers import assign, make_corpus

TREE = (
    "(ROOT (S (VP (VB Check) (NP (DT the) (NN bilge) (NN pump)) (PP (IN before) "
    "(NP (DT the) (JJ first) (NN crossing)))) (. .)))"
)
JOINED = (
    "(ROOT (S (VP (VB Check) (NP (DT the) (NN bilgepump)) (PP (IN before) "
    "(NP (DT the) (JJ first) (NN crossing)))) (. .)))"
)
SPLIT = (
    "(ROOT (S (VP (VB Check) (NP (DT the) (NN bilge) (NN pump)) (PP (IN be) (IN fore) "
    "(NP (DT the) (JJ first) (NN crossing)))) (. .)))"
)


def _setup(db, people):
    _corpus, sentences = make_corpus(db, ["Check the bilge pump before the first crossing ."])
    assign(db, sentences, people.ann1, people.ann2)
    return sentences[0]


def _save(me, sid, base, tree):
    resp = me.client.post(
        f"/api/bench/{sid}/revisions", headers=me.headers(), json={"base": base, "tree": tree}
    )
    assert resp.status_code == 201, resp.text


def _fix(me, sid, **body):
    return me.client.post(f"/api/bench/{sid}/tokens", headers=me.headers(), json=body)


def test_tokens_join_carries_the_tree_and_keeps_the_other_annotators_work(
    db, people, login
) -> None:
    s = _setup(db, people)
    ann1, ann2 = login("ann1"), login("ann2")
    _save(ann1, s.id, 0, TREE)
    _save(ann2, s.id, 0, TREE)
    assert (
        ann2.client.post(
            f"/api/bench/{s.id}/submit", headers=ann2.headers(), json={"base": 1}
        ).status_code
        == 200
    )
    resp = _fix(ann1, s.id, base=1, position=2, count=2, tokens=["bilgepump"])
    assert resp.status_code == 201, resp.text
    body = resp.json()
    assert body["tokens"] == "Check the bilgepump before the first crossing .".split()
    assert body["revision"]["tree"] == JOINED and body["revision"]["source"] == "tokens"
    assert body["undo"] == {"base": 2, "position": 2, "count": 1, "tokens": ["bilge", "pump"]}
    db.expire_all()
    sentence = db.get(Sentence, s.id)
    assert sentence.token_version == 2 and sentence.text.startswith("Check the bilgepump")
    old = db.scalars(select(TokenVersion)).all()
    assert [(v.number, v.tokens[2:4], v.change) for v in old] == [
        (1, ["bilge", "pump"], {"position": 2, "count": 2, "tokens": ["bilgepump"]})
    ]
    # ann2's handed-in tree is kept on the earlier tokens, and the annotation is open again
    a2 = db.scalar(select(Annotation).where(Annotation.user_id == people.ann2.id))
    assert a2.state == "draft"
    r2 = db.scalars(select(Revision).where(Revision.annotation_id == a2.id)).all()
    assert [(r.tree, r.token_version) for r in r2] == [(TREE, 1)]
    # ann2 opens the Bench: their tree carried over, marked as made on the earlier tokens
    bench = ann2.client.get(f"/api/bench/{s.id}").json()
    assert bench["carried_from"] == 1 and bench["token_version"] == 2
    assert bench["tree"] == JOINED and "earlier tokens" in bench["start_note"]
    # agreement: only once both trees are on the current tokens
    assert (
        ann1.client.post(
            f"/api/bench/{s.id}/submit", headers=ann1.headers(), json={"base": 2}
        ).status_code
        == 200
    )
    assert db.scalars(select(AgreementRecord)).all() == []
    _save(ann2, s.id, 1, JOINED)
    assert (
        ann2.client.post(
            f"/api/bench/{s.id}/submit", headers=ann2.headers(), json={"base": 2}
        ).status_code
        == 200
    )
    records = db.scalars(select(AgreementRecord)).all()
    assert len(records) == 1 and records[0].identical


def test_tokens_split_gives_the_tag_to_both_halves_and_undo_joins_back(db, people, login) -> None:
    s = _setup(db, people)
    ann1 = login("ann1")
    _save(ann1, s.id, 0, TREE)
    split = _fix(
        ann1,
        s.id,
        base=1,
        position=4,
        count=1,
        tokens=["be", "fore"],
        active_seconds=12.5,
        actions={"retag": 2},
    )
    assert split.status_code == 201, split.text
    assert split.json()["revision"]["tree"] == SPLIT
    # the page's effort since its last save and the fix itself are counted with the fix
    fixed = db.scalar(select(Revision).where(Revision.number == 2))
    assert (fixed.active_seconds, fixed.actions) == (12.5, {"retag": 2, "tokens": 1})
    undo = split.json()["undo"]
    assert undo == {"base": 2, "position": 4, "count": 2, "tokens": ["before"]}
    back = _fix(ann1, s.id, **undo)
    assert back.status_code == 201, back.text
    assert back.json()["revision"]["tree"] == TREE
    db.expire_all()
    assert db.get(Sentence, s.id).token_version == 3
    assert [v.number for v in db.scalars(select(TokenVersion))] == [1, 2]


def test_tokens_bad_fixes_are_refused_with_the_reason(db, people, login) -> None:
    s = _setup(db, people)
    ann1 = login("ann1")
    assert _fix(ann1, s.id, base=1, position=0, count=1, tokens=["x"]).status_code == 422
    _save(ann1, s.id, 0, TREE)
    cases = [
        ({"position": 8, "count": 2, "tokens": ["x"]}, "one token, or two"),
        ({"position": 2, "count": 1, "tokens": ["bilge"]}, "same as before"),
        ({"position": 2, "count": 1, "tokens": ["bil ge"]}, "space"),
        ({"position": 2, "count": 2, "tokens": ["a", "b"]}, "only be joined into one"),
        ({"position": 12, "count": 1, "tokens": ["x"]}, "no token 13"),
    ]
    for body, why in cases:
        resp = _fix(ann1, s.id, base=1, **body)
        assert resp.status_code == 422, (body, resp.text)
        assert why in resp.json()["detail"], (body, resp.json())
    bad = _fix(ann1, s.id, base=1, position=2, count=1, tokens=["bilges"], actions={"x": 1})
    assert bad.status_code == 422 and "action count 'x'" in bad.json()["detail"], bad.text
    stale = _fix(ann1, s.id, base=5, position=2, count=1, tokens=["bilges"])
    assert stale.status_code == 409
    db.expire_all()
    assert db.get(Sentence, s.id).token_version == 1
    assert db.scalars(select(TokenVersion)).all() == []
