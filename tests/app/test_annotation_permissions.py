"""Blind annotation: each user reaches only sentences assigned to them and only their own
annotation. Unassigned and absent sentences both answer 404 with the same message."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from tests.app.bench_helpers import assign, flat_text, make_corpus

ROUTES = [
    ("get", "/api/bench/{sid}", None),
    ("post", "/api/bench/{sid}/revisions", {"base": 0, "tree": "(ROOT (NN x))"}),
    ("post", "/api/bench/{sid}/submit", {"base": 1}),
    ("patch", "/api/bench/{sid}/note", {"comment": "hi"}),
    ("post", "/api/bench/{sid}/reparse", {"pins": {"spans": [], "tags": []}}),
]


@pytest.fixture
def world(db, people):
    _, sentences = make_corpus(db)
    assign(db, sentences[:2], people.ann1, people.ann2)
    assign(db, sentences[2:3], people.ann1)
    return sentences


@pytest.mark.parametrize("method,path,body", ROUTES)
def test_annotation_unassigned_sentence_is_404(world, login, method, path, body) -> None:
    me = login("ann2")  # sentence 2 is ann1's only
    resp = getattr(me.client, method)(
        path.format(sid=world[2].id),
        headers=me.headers(),
        **({"json": body} if body is not None else {}),
    )
    assert resp.status_code == 404
    assert resp.json()["detail"] == f"sentence {world[2].id} is not in your queue"


@pytest.mark.parametrize("method,path,body", ROUTES)
def test_annotation_absent_sentence_is_the_same_404(world, login, method, path, body) -> None:
    me = login("ann2")
    resp = getattr(me.client, method)(
        path.format(sid=999_999),
        headers=me.headers(),
        **({"json": body} if body is not None else {}),
    )
    assert resp.status_code == 404
    assert resp.json()["detail"] == "sentence 999999 is not in your queue"


@pytest.mark.parametrize("method,path,body", ROUTES)
def test_annotation_anonymous_gets_401(app, world, method, path, body) -> None:
    client = TestClient(app)
    resp = getattr(client, method)(
        path.format(sid=world[0].id), **({"json": body} if body is not None else {})
    )
    assert resp.status_code == 401


@pytest.mark.parametrize("method,path,body", [r for r in ROUTES if r[0] != "get"])
def test_annotation_changes_need_csrf(world, login, method, path, body) -> None:
    me = login("ann1")
    resp = getattr(me.client, method)(path.format(sid=world[0].id), json=body)
    assert resp.status_code == 403


def test_annotation_admin_without_assignment_is_404_too(world, login) -> None:
    me = login("admin")
    assert me.client.get(f"/api/bench/{world[0].id}").status_code == 404


def test_annotation_each_annotator_sees_only_their_own_tree(world, login) -> None:
    s = world[0]
    one, two = login("ann1"), login("ann2")
    mine = flat_text(s.tokens, ["DT", "NN", "NN", "VBD", "VBN", "IN", "DT", "NN", "NN", "."])
    resp = one.client.post(
        f"/api/bench/{s.id}/revisions", headers=one.headers(), json={"base": 0, "tree": mine}
    )
    assert resp.status_code == 201
    one.client.patch(
        f"/api/bench/{s.id}/note", headers=one.headers(), json={"comment": "ann1's private doubt"}
    )
    theirs = two.client.get(f"/api/bench/{s.id}").json()
    assert theirs["tree"] != mine and theirs["source"] == "flat"
    assert theirs["annotation"] == {
        "id": None,
        "state": "draft",
        "head": 0,
        "comment": "",
        "flag": None,
        "submitted_at": None,
        "start_kind": None,
        "start_grammar_version": None,
    }
    # ann2's first save is based on 0: ann1's head does not leak into ann2's annotation
    ok = two.client.post(
        f"/api/bench/{s.id}/revisions",
        headers=two.headers(),
        json={"base": 0, "tree": flat_text(s.tokens)},
    )
    assert ok.status_code == 201 and ok.json()["revision"]["number"] == 1
    assert one.client.get(f"/api/bench/{s.id}").json()["tree"] == mine


def test_annotation_queue_lists_only_own_assignments(world, login) -> None:
    one, two = login("ann1"), login("ann2")
    assert [it["sentence_id"] for it in one.client.get("/api/queue").json()["items"]] == [
        world[0].id,
        world[1].id,
        world[2].id,
    ]
    assert [it["sentence_id"] for it in two.client.get("/api/queue").json()["items"]] == [
        world[0].id,
        world[1].id,
    ]
