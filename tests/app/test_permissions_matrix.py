"""Every route times every role against the answer it must give.

Roles: anonymous, an annotator who owns the Bench sentence (``ann1``), another annotator
(``ann2``), an adjudicator (``adj``), an admin. The expected table below names, for each
(method, path), who may use it and what a permitted, well-formed request answers. The rules:

* anonymous: 401 on ``/api/...``, a redirect to ``/login?next=...`` on pages;
* logged in but below the route's role: 403;
* Bench routes act only on the caller's own annotation of a sentence assigned to them: every
  other user (another annotator, an adjudicator or admin without the assignment) gets 404,
  the same answer as for a sentence that does not exist, so nothing about it leaks;
* nobody ever gets a 5xx.

Routes are enumerated from the app, so a new route without a row here fails
``test_permissions_every_route_has_an_expectation``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pytest
from fastapi.testclient import TestClient

from app.models import GrammarVersion, Sentence, User
from tests.app.bench_helpers import assign, flat_text, make_corpus
from tests.app.conftest import PASSWORD_HASH
from tests.app.review_helpers import LABELS, SENTENCE, TAGS, TREE_A, TREE_B, submit_tree
from tests.app.route_inventory import app_routes

PUBLIC, USER, ADJ, ADMIN, ASSIGNED = "public", "user", "adjudicator", "admin", "assigned"
RANK = {USER: 1, ADJ: 2, ADMIN: 3}
ROLES = ("anonymous", "ann2", "ann1", "adj", "admin")  # ann1 owns the Bench sentence
ROLE_RANK = {"anonymous": 0, "ann2": 1, "ann1": 1, "adj": 2, "admin": 3}
MISSING = 987_654  # an id that exists nowhere


@dataclass
class Spec:
    """Who may call a route and what a permitted call answers (a set when it depends on the
    caller, e.g. ``/login`` redirects someone already logged in)."""

    who: str
    ok: int | frozenset[int]
    json: Any = None
    form: dict[str, str] | None = None
    upload: bool = False
    query: str = ""
    ids: dict[str, str] = field(default_factory=dict)  # path parameter -> world key


def _ok(*codes: int) -> frozenset[int]:
    return frozenset(codes)


TEXT_UPLOAD = b"the tide turned at noon .\nthe mate rang the bell .\n"

EXPECTED: dict[tuple[str, str], Spec] = {
    # --- framework pages
    ("GET", "/openapi.json"): Spec(PUBLIC, 200),
    ("GET", "/api-docs"): Spec(PUBLIC, 200),
    # --- health, session, login
    ("GET", "/api/health"): Spec(PUBLIC, 200),
    ("GET", "/api/session"): Spec(USER, 200),
    ("GET", "/login"): Spec(PUBLIC, _ok(200, 303)),  # 303: already logged in
    ("POST", "/login"): Spec(PUBLIC, 401, form={"username": "nobody", "password": "x"}),
    ("POST", "/logout"): Spec(USER, 303, form={}),
    # --- Bench and Queue (own annotations of assigned sentences only)
    ("GET", "/api/bench/{sentence_id}"): Spec(ASSIGNED, 200),
    ("GET", "/api/bench/{sentence_id}/suggestion"): Spec(ASSIGNED, 200),  # null: no grammar
    ("GET", "/api/bench/{sentence_id}/place"): Spec(ASSIGNED, 200),  # ready: no grammar
    ("GET", "/api/bench/{sentence_id}/revisions"): Spec(ASSIGNED, 200),
    ("POST", "/api/bench/{sentence_id}/tokens"): Spec(
        ASSIGNED, 422, json={"base": 1, "position": 0, "count": 1, "tokens": ["a b"]}
    ),
    ("POST", "/api/bench/{sentence_id}/revisions"): Spec(
        ASSIGNED, 201, json={"base": 0, "tree": "@bench_tree"}
    ),
    ("POST", "/api/bench/{sentence_id}/submit"): Spec(ASSIGNED, 409, json={"base": 99}),
    ("PATCH", "/api/bench/{sentence_id}/note"): Spec(ASSIGNED, 200, json={"comment": "ok"}),
    ("POST", "/api/bench/{sentence_id}/reparse"): Spec(ASSIGNED, 409, json={}),  # no grammar
    ("GET", "/api/queue"): Spec(USER, 200),
    ("GET", "/bench"): Spec(USER, 303),
    ("GET", "/bench/{sentence_id}"): Spec(ASSIGNED, 200),
    ("GET", "/queue"): Spec(USER, 200),
    # --- corpora
    ("GET", "/api/corpora"): Spec(USER, 200),
    ("POST", "/api/corpora"): Spec(ADMIN, 201, json={"name": "Matrix corpus"}),
    ("GET", "/api/corpora/{corpus_id}"): Spec(USER, 200),
    ("PATCH", "/api/corpora/{corpus_id}"): Spec(ADMIN, 200, json={}),
    ("POST", "/api/corpora/{corpus_id}/remove"): Spec(
        ADMIN, 422, json={"confirm_name": "not its name"}
    ),
    ("GET", "/api/corpora/{corpus_id}/sentences"): Spec(USER, 200),
    ("POST", "/api/corpora/import"): Spec(
        ADMIN, 201, upload=True, form={"corpus_name": "Matrix import"}
    ),
    ("GET", "/api/corpora/{corpus_id}/export"): Spec(ADJ, 200),
    # one annotator per sentence is already met: nobody gains an assignment mid-test
    ("POST", "/api/corpora/{corpus_id}/assign"): Spec(ADMIN, 200, json={"per_sentence": 1}),
    # the member list: adjudicators read it, admins change it (removing someone who is not
    # on it gets past the role check and changes nothing)
    ("GET", "/api/corpora/{corpus_id}/members"): Spec(ADJ, 200),
    ("POST", "/api/corpora/{corpus_id}/members"): Spec(ADMIN, 200, json={"username": "spare"}),
    ("POST", "/api/corpora/{corpus_id}/members/remove"): Spec(
        ADMIN, 404, json={"username": "nobody"}
    ),
    ("POST", "/corpora/{corpus_id}/members"): Spec(ADMIN, 303, form={"username": "spare"}),
    ("POST", "/corpora/{corpus_id}/members/remove"): Spec(ADMIN, 404, form={"username": "nobody"}),
    ("GET", "/"): Spec(USER, 200),
    ("POST", "/corpora"): Spec(ADMIN, 303, form={"name": "Matrix page corpus"}),
    ("GET", "/corpora/{corpus_id}"): Spec(USER, 200),
    ("POST", "/corpora/{corpus_id}/assign"): Spec(ADMIN, _ok(200, 303), form={"per_sentence": "1"}),
    ("POST", "/corpora/{corpus_id}/settings"): Spec(
        ADMIN, 303, form={"label_set": " ".join(LABELS), "tag_set": " ".join(TAGS)}
    ),
    ("POST", "/corpora/{corpus_id}/remove"): Spec(
        ADMIN, 422, form={"confirm_name": "not its name"}
    ),
    ("GET", "/transfer"): Spec(USER, 200),
    ("POST", "/transfer/import"): Spec(
        ADMIN, 303, upload=True, form={"new_corpus": "Matrix page import"}
    ),
    ("GET", "/transfer/export"): Spec(ADJ, 200, query="corpus=@corpus"),
    # --- grammars
    ("GET", "/api/grammars"): Spec(USER, 200, query="corpus_id=@corpus"),
    ("GET", "/api/grammars/{version_id}"): Spec(USER, 200),
    # asking to train a corpus that does not exist: past the role check, nothing queued
    ("POST", "/api/grammars"): Spec(ADJ, 404, json={"corpus_id": MISSING}),
    ("GET", "/grammars"): Spec(USER, 200, query="corpus=@corpus"),
    ("POST", "/grammars/train"): Spec(ADJ, 404, form={"corpus_id": str(MISSING)}),
    # reference sets: adding one to a corpus that does not exist and switching a set that
    # does not exist get past the role check and change nothing
    ("POST", "/grammars/reference"): Spec(
        ADMIN, 404, upload=True, form={"corpus_id": str(MISSING)}
    ),
    ("POST", "/grammars/reference/{reference_id}/use"): Spec(
        ADMIN, 404, form={"corpus_id": "@corpus", "in_use": "true"}, ids={"reference_id": "missing"}
    ),
    # --- review and agreement
    ("GET", "/api/review"): Spec(ADJ, 200),
    ("GET", "/api/review/{sentence_id}"): Spec(ADJ, 200, ids={"sentence_id": "review"}),
    ("POST", "/api/review/{sentence_id}/check"): Spec(
        ADJ, 200, json={"tree": TREE_A}, ids={"sentence_id": "review"}
    ),
    ("POST", "/api/review/{sentence_id}/settle"): Spec(
        ADJ, 422, json={"tree": "(S (NN"}, ids={"sentence_id": "review"}
    ),
    ("POST", "/api/review/{sentence_id}/reopen"): Spec(
        ADJ, 409, json={}, ids={"sentence_id": "review"}
    ),
    # the review sentence is in review, not held back or dropped: past the role check, 409
    ("GET", "/api/held"): Spec(ADJ, 200, query="corpus_id=@corpus"),
    ("POST", "/api/review/{sentence_id}/release"): Spec(
        ADJ, 409, json={}, ids={"sentence_id": "review"}
    ),
    ("POST", "/api/review/{sentence_id}/drop"): Spec(
        ADJ, 409, json={}, ids={"sentence_id": "review"}
    ),
    ("POST", "/api/review/{sentence_id}/restore"): Spec(
        ADJ, 409, json={}, ids={"sentence_id": "review"}
    ),
    ("POST", "/review/held/{sentence_id}/release"): Spec(
        ADJ, 409, form={}, ids={"sentence_id": "review"}
    ),
    ("POST", "/review/held/{sentence_id}/drop"): Spec(
        ADJ, 409, form={}, ids={"sentence_id": "review"}
    ),
    ("POST", "/review/held/{sentence_id}/restore"): Spec(
        ADJ, 409, form={}, ids={"sentence_id": "review"}
    ),
    ("GET", "/review"): Spec(ADJ, 200),
    ("GET", "/review/{sentence_id}"): Spec(ADJ, 200, ids={"sentence_id": "review"}),
    ("GET", "/agreement"): Spec(USER, 200, query="corpus=@corpus"),
    ("GET", "/agreement/log.csv"): Spec(USER, 200, query="corpus=@corpus"),
    ("GET", "/agreement/effort.csv"): Spec(USER, 200, query="corpus=@corpus"),
    # --- findings (adjudicators) and search (everyone, as they may see)
    ("GET", "/api/corpora/{corpus_id}/findings"): Spec(ADJ, 200),
    ("POST", "/api/corpora/{corpus_id}/findings/runs"): Spec(ADJ, 202, json={}),
    ("POST", "/api/corpora/{corpus_id}/findings/{finding_id}/fine"): Spec(
        ADJ, 404, json={}, ids={"finding_id": "missing"}
    ),
    ("POST", "/api/corpora/{corpus_id}/findings/{finding_id}/reopen"): Spec(
        ADJ, 404, json={}, ids={"finding_id": "missing"}
    ),
    ("GET", "/findings"): Spec(ADJ, 200, query="corpus=@corpus"),
    ("POST", "/findings/run"): Spec(ADJ, 303, form={"corpus_id": "@corpus"}),
    ("POST", "/findings/{finding_id}/verdict"): Spec(
        ADJ, 404, form={"corpus_id": "@corpus", "action": "fine"}, ids={"finding_id": "missing"}
    ),
    ("GET", "/api/corpora/{corpus_id}/search"): Spec(USER, 200, query="pattern=the"),
    ("GET", "/api/corpora/{corpus_id}/search/export"): Spec(USER, 200, query="pattern=the"),
    ("GET", "/search"): Spec(USER, 200, query="corpus=@corpus&pattern=the"),
    ("GET", "/search/export"): Spec(USER, 200, query="corpus=@corpus&pattern=the"),
    # --- users (the target is a spare account, so no caller loses their session)
    ("GET", "/api/users"): Spec(ADMIN, 200),
    ("POST", "/api/users"): Spec(
        ADMIN, 201, json={"username": "matrix.new", "password": "long enough pw"}
    ),
    ("PATCH", "/api/users/{user_id}"): Spec(ADMIN, 200, json={}),
    ("GET", "/users"): Spec(ADMIN, 200),
    ("POST", "/users"): Spec(
        ADMIN,
        303,
        form={"username": "matrix.page", "password": "long enough pw", "role": "annotator"},
    ),
    ("POST", "/users/{user_id}/role"): Spec(ADMIN, 303, form={"role": "annotator"}),
    ("POST", "/users/{user_id}/active"): Spec(ADMIN, 303, form={"active": "true"}),
    ("POST", "/users/{user_id}/password"): Spec(ADMIN, 303, form={"password": "another long pw"}),
}

DEFAULT_IDS = {
    "sentence_id": "bench",
    "corpus_id": "corpus",
    "version_id": "version",
    "user_id": "spare",
}


@pytest.fixture
def world(db, people) -> dict[str, Any]:
    """A corpus with one sentence in review (ann1 and ann2 disagree), one Bench sentence
    assigned to ann1 only, one to ann2 only; a grammar version row; a spare account."""
    corpus, sentences = make_corpus(
        db, [SENTENCE, "the mate left the quay .", "the tide turned ."], labels=LABELS, tags=TAGS
    )
    review, bench, theirs = sentences
    assign(db, [review], people.ann1, people.ann2)
    assign(db, [bench], people.ann1)
    assign(db, [theirs], people.ann2)
    version = GrammarVersion(corpus_id=corpus.id, number=1, status="failed", message="no gold yet")
    spare = User(
        username="spare", display_name="Spare", role="annotator", password_hash=PASSWORD_HASH
    )
    db.add_all([version, spare])
    db.commit()
    return {
        "corpus": corpus.id,
        "bench": bench.id,
        "review": review.id,
        "version": version.id,
        "spare": spare.id,
        "missing": MISSING,
        "bench_tree": flat_text(bench.tokens, ["DT", "NN", "VBD", "DT", "NN", "."]),
        "review_tokens": review.tokens,
    }


def _is_api(path: str) -> bool:
    return path.startswith("/api/")


def _url(path: str, spec: Spec, world: dict[str, Any]) -> str:
    url = path
    for name, key in {**DEFAULT_IDS, **spec.ids}.items():
        url = url.replace("{" + name + "}", str(world[key]))
    if spec.query:
        url += "?" + spec.query.replace("@corpus", str(world["corpus"]))
    return url


def _resolve(value: Any, world: dict[str, Any]) -> Any:
    if isinstance(value, str) and value.startswith("@"):
        return world[value[1:]]
    if isinstance(value, dict):
        return {k: _resolve(v, world) for k, v in value.items()}
    return value


def _call(
    client: TestClient, csrf: str | None, method: str, path: str, spec: Spec, world: dict[str, Any]
):  # type: ignore[no-untyped-def]
    url = _url(path, spec, world)
    kwargs: dict[str, Any] = {"follow_redirects": False}
    headers = {"X-CSRF-Token": csrf} if csrf else {}
    if spec.form is not None or spec.upload:
        kwargs["data"] = _resolve(dict(spec.form or {}), world)
        if spec.upload:
            kwargs["files"] = {"upload": ("tide.txt", TEXT_UPLOAD, "text/plain")}
    elif spec.json is not None:
        kwargs["json"] = _resolve(spec.json, world)
    return client.request(method, url, headers=headers, **kwargs)


def _expected(spec: Spec, role: str, path: str) -> frozenset[int]:
    if spec.who == PUBLIC:
        return spec.ok if isinstance(spec.ok, frozenset) else _ok(spec.ok)
    if role == "anonymous":
        return _ok(401) if _is_api(path) else _ok(303)
    if spec.who == ASSIGNED:
        allowed = role == "ann1"
        return (
            (spec.ok if isinstance(spec.ok, frozenset) else _ok(spec.ok)) if allowed else _ok(404)
        )
    if ROLE_RANK[role] < RANK[spec.who]:
        return _ok(403)
    return spec.ok if isinstance(spec.ok, frozenset) else _ok(spec.ok)


def test_permissions_every_route_has_an_expectation(app) -> None:
    found = {(m, p) for m, p, _ in app_routes(app)}
    missing = sorted(found - set(EXPECTED))
    stale = sorted(set(EXPECTED) - found)
    assert not missing, f"routes without a row in EXPECTED (add who may call them): {missing}"
    assert not stale, f"rows in EXPECTED for routes that no longer exist: {stale}"


def test_permissions_matrix(app, login, people, world) -> None:
    # ann1 and ann2 submit different trees of the review sentence: it waits in review
    clients: dict[str, Any] = {name: login(name) for name in ROLES if name != "anonymous"}
    submit_tree(clients["ann1"], world["review"], TREE_A)
    submit_tree(clients["ann2"], world["review"], TREE_B)
    anonymous = TestClient(app)

    wrong: list[str] = []
    routes = sorted(
        dict.fromkeys((m, p) for m, p, _ in app_routes(app)), key=lambda r: r[1] == "/logout"
    )
    for method, path in routes:
        spec = EXPECTED[(method, path)]
        for role in ROLES:
            if role == "anonymous":
                client, csrf = anonymous, None
            else:
                client, csrf = clients[role].client, clients[role].csrf
            resp = _call(client, csrf, method, path, spec, world)
            want = _expected(spec, role, path)
            where = f"{method} {path} as {role}"
            if resp.status_code >= 500 or resp.status_code not in want:
                wrong.append(
                    f"{where}: {resp.status_code} (want {sorted(want)}) {resp.text[:160]!r}"
                )
                continue
            if role == "anonymous" and spec.who != PUBLIC and not _is_api(path):
                if not resp.headers.get("location", "").startswith("/login?next="):
                    wrong.append(f"{where}: redirects to {resp.headers.get('location')}")
    assert not wrong, "\n".join(wrong)


def test_permissions_bench_404_is_the_same_for_absent_and_unassigned(login, world) -> None:
    """Another annotator learns nothing: the answer for a sentence assigned to someone else is
    word for word the answer for an id that does not exist."""
    me = login("ann2")
    theirs = me.client.get(f"/api/bench/{world['bench']}").json()["detail"]
    nothing = me.client.get(f"/api/bench/{MISSING}").json()["detail"]
    assert theirs.replace(str(world["bench"]), "N") == nothing.replace(str(MISSING), "N")


def test_permissions_annotator_never_sees_another_tree_before_review(login, world) -> None:
    one, two = login("ann1"), login("ann2")
    submit_tree(one, world["review"], TREE_A)
    # ann2 has not submitted: their Bench shows their own start tree, and every route that
    # shows submitted trees is closed to them
    bench = two.client.get(f"/api/bench/{world['review']}").json()
    assert bench["tree"] != TREE_A and bench["annotation"]["head"] == 0
    for url in (f"/api/review/{world['review']}", "/api/review", f"/review/{world['review']}"):
        resp = two.client.get(url, follow_redirects=False)
        assert resp.status_code == 403, url
        assert "VBD left" not in resp.text


def test_permissions_dual_role_adjudicator_is_blind_while_annotating(
    login, world, db, people
) -> None:
    # the adjudicator is also an annotator of the review sentence and has a draft of it
    assign(db, [db.get(Sentence, world["review"])], people.adjudicator)
    one, adj = login("ann1"), login("adj")
    submit_tree(one, world["review"], TREE_A)
    draft = adj.client.post(
        f"/api/bench/{world['review']}/revisions",
        headers=adj.headers(),
        json={"base": 0, "tree": TREE_B},
    )
    assert draft.status_code == 201, draft.text
    sid, corpus = world["review"], world["corpus"]
    for url in (f"/api/review/{sid}", f"/review/{sid}"):
        resp = adj.client.get(url, follow_redirects=False)
        assert resp.status_code == 403, url
        assert "VBD left" not in resp.text and "submit your own tree" in resp.text
    settle = adj.client.post(
        f"/api/review/{sid}/settle", headers=adj.headers(), json={"tree": TREE_A}
    )
    assert settle.status_code == 403 and "VBD left" not in settle.text
    for url in (
        f"/api/corpora/{corpus}/search?pattern=quay&scope=annotations",
        f"/api/corpora/{corpus}/search/export?pattern=quay&scope=annotations",
    ):
        found = adj.client.get(url)
        assert found.status_code == 200, found.text
        assert "(PP (IN at)" not in found.text  # ann1's tree of the sentence (A has a PP)
        assert "(ADVP (IN at)" in found.text  # the adjudicator's own draft (B) is theirs
    # once the adjudicator's own tree is submitted, the others' trees are theirs to see
    head = draft.json()["annotation"]["head"]
    assert (
        adj.client.post(
            f"/api/bench/{sid}/submit", json={"base": head}, headers=adj.headers()
        ).status_code
        == 200
    )
    resp = adj.client.get(f"/api/review/{sid}")
    assert resp.status_code == 200 and "VBD left" in resp.text


def test_permissions_findings_hide_others_annotations_of_sentences_still_annotated() -> None:
    from app.services.findings import visible_occurrences

    occurrences = [
        {"sentence": 5, "source": "annotation", "by": "ann1", "analysis": "PP"},
        {"sentence": 5, "source": "annotation", "by": "adj", "analysis": "ADVP"},
        {"sentence": 5, "source": "gold", "by": "import", "analysis": "PP"},
        {"sentence": 6, "source": "annotation", "by": "ann1", "analysis": "PP"},
    ]
    # adj still annotates sentence 5: ann1's tree of it is left out, their own and gold stay
    shown = visible_occurrences(occurrences, {5}, "adj")
    assert [(o["sentence"], o["by"]) for o in shown] == [(5, "adj"), (5, "import"), (6, "ann1")]
    assert visible_occurrences(occurrences, set(), "adj") == occurrences
