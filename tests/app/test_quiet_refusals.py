"""Expected refusals answered quietly to the pages: with ``X-Treewright-Quiet-Refusal: 1`` a
409 or 422 from a service comes back as 200 with the status in ``X-Treewright-Status`` and the
same body (so the browser logs no failed resource); without it, the plain status. Other
errors keep their status either way. The sentence is the invented ferry example."""

from __future__ import annotations

from tests.app.bench_helpers import assign, flat_text, make_corpus

QUIET = {"X-Treewright-Quiet-Refusal": "1"}


def test_a_stale_save_is_409_or_quiet(db, people, login) -> None:
    corpus, sentences = make_corpus(db)
    s = sentences[0]
    assign(db, [s], people.ann1)
    ann1 = login("ann1")
    tree = flat_text(s.tokens)
    first = ann1.client.post(
        f"/api/bench/{s.id}/revisions", json={"base": 0, "tree": tree}, headers=ann1.headers()
    )
    assert first.status_code == 201
    plain = ann1.client.post(
        f"/api/bench/{s.id}/revisions", json={"base": 0, "tree": tree}, headers=ann1.headers()
    )
    quiet = ann1.client.post(
        f"/api/bench/{s.id}/revisions",
        json={"base": 0, "tree": tree},
        headers={**ann1.headers(), **QUIET},
    )
    assert plain.status_code == 409 and "X-Treewright-Status" not in plain.headers
    assert quiet.status_code == 200 and quiet.headers["X-Treewright-Status"] == "409"
    assert quiet.json() == plain.json() and quiet.json()["current"]["number"] == 1


def test_a_tree_that_does_not_fit_is_422_or_quiet(db, people, login) -> None:
    corpus, sentences = make_corpus(db)
    s = sentences[0]
    assign(db, [s], people.ann1)
    ann1 = login("ann1")
    bad = {"base": 0, "tree": "(ROOT (S (NN oops))"}
    plain = ann1.client.post(f"/api/bench/{s.id}/revisions", json=bad, headers=ann1.headers())
    quiet = ann1.client.post(
        f"/api/bench/{s.id}/revisions", json=bad, headers={**ann1.headers(), **QUIET}
    )
    assert plain.status_code == 422
    assert quiet.status_code == 200 and quiet.headers["X-Treewright-Status"] == "422"
    assert quiet.json() == plain.json() and quiet.json()["kind"] == "brackets"


def test_other_errors_keep_their_status(db, people, login) -> None:
    corpus, sentences = make_corpus(db)
    ann1 = login("ann1")  # not assigned: 404 stays 404, asked quietly or not
    resp = ann1.client.post(
        f"/api/bench/{sentences[0].id}/revisions",
        json={"base": 0, "tree": flat_text(sentences[0].tokens)},
        headers={**ann1.headers(), **QUIET},
    )
    assert resp.status_code == 404 and "X-Treewright-Status" not in resp.headers
