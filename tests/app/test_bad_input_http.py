"""Bad input over HTTP answers 4xx saying what and where, never 500, and changes nothing.

One test per kind: malformed brackets (line and column), words that differ from the sentence,
labels outside the label set, uploads over the configured limit (413), non-UTF-8 text, empty
or wrongly typed bodies (every route that takes one), ids that do not exist or belong to
another corpus. Each checks that the stored rows are the same afterwards.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from typing import Any

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.main import create_app
from app.models import Annotation, Corpus, Document, Event, Gold, Revision, Sentence, User
from tests.app.bench_helpers import assign, flat_text, make_corpus
from tests.app.conftest import LoggedIn
from tests.app.route_inventory import app_routes

TABLES = (Corpus, Document, Sentence, Annotation, Revision, Gold, User)
GOOD_GOLD = "(ROOT (S (NP (DT The) (NN pier)) (VP (VBD flooded)) (. .)))"


def counts(db: Session) -> dict[str, int]:
    db.expire_all()
    return {t.__tablename__: db.scalar(select(func.count()).select_from(t)) or 0 for t in TABLES}


@pytest.fixture
def world(db, people, login) -> dict[str, Any]:
    """Two corpora; ann1 is assigned the first sentence of corpus A and has saved it once."""
    a, a_sents = make_corpus(db, name="Harbour A", policy="refuse")
    b, b_sents = make_corpus(db, ["The buoy drifted ."], name="Harbour B")
    assign(db, a_sents[:1], people.ann1)
    me = login("ann1")
    s = a_sents[0]
    first = flat_text(s.tokens, ["DT", "NN", "NN", "VBD", "VBN", "IN", "DT", "NN", "NN", "."])
    assert (
        me.client.post(
            f"/api/bench/{s.id}/revisions", headers=me.headers(), json={"base": 0, "tree": first}
        ).status_code
        == 201
    )
    doc_b = db.scalar(select(Document.id).where(Document.corpus_id == b.id))
    return {
        "a": a.id,
        "b": b.id,
        "s": s,
        "b_sentence": b_sents[0].id,
        "doc_b": doc_b,
        "me": me,
        "admin": login("admin"),
        "adj": login("adj"),
        "db": db,
    }


def _save(me: LoggedIn, sid: int, tree: str, base: int = 1, **extra: Any):  # type: ignore[no-untyped-def]
    return me.client.post(
        f"/api/bench/{sid}/revisions",
        headers=me.headers(),
        json={"base": base, "tree": tree, **extra},
    )


def _import(who: LoggedIn, data: bytes, kind: str = "gold", corpus: str = "Harbour A", **form: str):  # type: ignore[no-untyped-def]
    return who.client.post(
        "/api/corpora/import",
        headers=who.headers(),
        data={"corpus_name": corpus, "kind": kind, **form},
        files={"upload": ("pier.ptb", data, "text/plain")},
    )


def test_bad_input_malformed_brackets_give_line_and_column(world) -> None:
    db, me, s = world["db"], world["me"], world["s"]
    before = counts(db)
    tree = "(ROOT (S (DT The)\n  (NN port) (NN engine) ((VBD was)))"
    resp = _save(me, s.id, tree)
    assert resp.status_code == 422
    body = resp.json()
    assert body["kind"] == "brackets" and body["line"] == 2 and body["column"] >= 1
    assert "line 2" in body["detail"]
    check = world["adj"].client.post(
        f"/api/review/{s.id}/check", headers=world["adj"].headers(), json={"tree": "(S (NN"}
    )
    assert check.status_code == 422 and check.json()["kind"] == "brackets"
    assert check.json()["line"] == 1 and check.json()["column"] == 7
    # an import file broken on its third line: the answer names file, line and column
    data = f"{GOOD_GOLD}\n{GOOD_GOLD}\n(ROOT (S (NN x)) ))\n".encode()
    imp = _import(world["admin"], data)
    assert imp.status_code == 422
    assert imp.json()["line"] == 3 and imp.json()["column"] == 19
    assert "pier.ptb, line 3, column 19" in imp.json()["detail"]
    assert counts(db) == before


def test_bad_input_words_that_differ_from_the_sentence(world) -> None:
    db, me, s = world["db"], world["me"], world["s"]
    before = counts(db)
    words = list(s.tokens)
    words[3] = "halted"
    resp = _save(me, s.id, flat_text(words))
    assert resp.status_code == 422
    body = resp.json()
    assert body["kind"] == "words" and body["position"] == 3
    assert body["expected"] == "was" and body["found"] == "halted"
    assert "word 4" in body["detail"]
    short = _save(me, s.id, flat_text(list(s.tokens)[:-1]))
    assert short.status_code == 422 and short.json()["kind"] == "words"
    assert counts(db) == before


def test_bad_input_labels_outside_the_label_set(world) -> None:
    db, me, s = world["db"], world["me"], world["s"]
    before = counts(db)
    tags = ["DT", "NN", "NN", "VBD", "VBN", "IN", "DT", "NN", "NN", "."]
    tree = (
        "(ROOT (S (NP-SBJ "
        + " ".join(f"({t} {w})" for t, w in zip(tags[:3], s.tokens[:3], strict=True))
        + ") (GADGET "
        + " ".join(f"({t} {w})" for t, w in zip(tags[3:], s.tokens[3:], strict=True))
        + ")))"
    )
    resp = _save(me, s.id, tree, confirm_labels=True)  # corpus A refuses unknown labels
    assert resp.status_code == 422
    body = resp.json()
    assert body["kind"] == "labels" and body["labels"] == ["GADGET"]
    assert body["can_confirm"] is False and "GADGET" in body["detail"]
    assert counts(db) == before


def test_bad_input_oversize_upload_is_413_with_the_configured_limit(settings, people) -> None:
    settings.max_upload_bytes = 2_000
    application = create_app(settings)
    try:
        admin = LoggedIn(application, "admin")
        db = application.state.sessionmaker()
        before = counts(db)
        big = (GOOD_GOLD + "\n").encode() * 60  # about 3,600 bytes
        resp = _import(admin, big)
        assert resp.status_code == 413
        assert "limit of 2000 bytes" in resp.json()["detail"]

        def stream() -> Iterator[bytes]:  # no Content-Length: the limit is counted as it comes
            for _ in range(10):
                yield b"x" * 500

        chunked = admin.client.post(
            "/api/bench/1/revisions",
            content=stream(),
            headers={**admin.headers(), "content-type": "application/json"},
        )
        assert chunked.status_code == 413
        page = admin.client.post(
            "/transfer/import",
            data={"csrf_token": admin.csrf, "new_corpus": "Too big"},
            files={"upload": ("big.ptb", big, "text/plain")},
        )
        assert page.status_code == 413
        assert counts(db) == before
        db.close()
    finally:
        application.state.engine.dispose()


def test_bad_input_non_utf8_text(world) -> None:
    db, me, s = world["db"], world["me"], world["s"]
    before = counts(db)
    latin1 = "The pier flooded .\nCaf\u00e9 closed .\n".encode("latin-1")
    imp = _import(world["admin"], latin1, kind="text")
    assert imp.status_code == 422
    # the undecodable byte is named by its place in the line: the fourth byte of "Caf\xe9"
    assert imp.json()["line"] == 2 and "byte 4 of the line" in imp.json()["detail"]
    page = world["admin"].client.post(
        "/transfer/import",
        data={"csrf_token": world["admin"].csrf, "corpus_name": "Harbour A", "kind": "text"},
        files={"upload": ("cafe.txt", latin1, "text/plain")},
    )
    assert page.status_code == 422 and "line 2" in page.text
    body = b'{"base": 1, "tree": "(ROOT (S (NN caf\xe9)))"}'
    resp = me.client.post(
        f"/api/bench/{s.id}/revisions",
        content=body,
        headers={**me.headers(), "content-type": "application/json"},
    )
    assert resp.status_code in (400, 422), resp.text
    assert counts(db) == before


BAD_BODIES: list[tuple[str, Any]] = [
    ("empty", None),
    ("a string", '"tree"'),
    ("a list", "[1, 2]"),
    ("null", "null"),
    (
        "wrong types",
        '{"base": "one", "tree": 5, "corpus_id": "x", "name": 7, "role": 3,'
        ' "confirm_name": [], "per_sentence": "many", "username": {}}',
    ),
    ("broken JSON", '{"base": 1, "tree": '),
]


@pytest.mark.parametrize("label, raw", BAD_BODIES, ids=[b[0] for b in BAD_BODIES])
def test_bad_input_empty_or_wrongly_typed_bodies(app, world, label, raw) -> None:
    db, admin, me = world["db"], world["admin"], world["me"]
    before = counts(db)
    wrong = []
    for method, path, route in app_routes(app):
        if not path.startswith("/api/") or getattr(route, "body_field", None) is None:
            continue
        who = me if path.startswith("/api/bench/") else admin
        url = (
            path.replace("{sentence_id}", str(world["s"].id))
            .replace("{corpus_id}", str(world["a"]))
            .replace("{user_id}", str(admin.user_id))
        )
        # any other id in the path (findings, reference sets) gets a well-formed number, so
        # that only the body is wrong
        url = re.sub(r"\{[a-z_]+_id\}", "1", url)
        kwargs: dict[str, Any] = {"headers": {**who.headers(), "content-type": "application/json"}}
        if raw is not None:
            kwargs["content"] = raw
        resp = who.client.request(method, url, **kwargs)
        if not 400 <= resp.status_code < 500:
            wrong.append(f"{method} {path}: {resp.status_code} {resp.text[:200]}")
        elif resp.status_code == 422 and isinstance(resp.json()["detail"], list):
            locs = [e["loc"] for e in resp.json()["detail"]]
            if not all(loc and loc[0] == "body" for loc in locs):
                wrong.append(f"{method} {path}: 422 without a body location: {locs}")
    assert not wrong, "\n".join(wrong)
    assert counts(db) == before


def test_bad_input_ids_that_do_not_exist_or_belong_elsewhere(world) -> None:
    db, admin, adj, me = world["db"], world["admin"], world["adj"], world["me"]
    a, b = world["a"], world["b"]
    before = counts(db)
    answers = {
        "corpus": admin.client.get("/api/corpora/987654"),
        "corpus page": admin.client.get("/corpora/987654"),
        "grammar version": admin.client.get("/api/grammars/987654"),
        "grammars of corpus": admin.client.get("/api/grammars?corpus_id=987654"),
        "user": admin.client.patch(
            "/api/users/987654", headers=admin.headers(), json={"role": "annotator"}
        ),
        "review sentence": adj.client.get("/api/review/987654"),
        "bench sentence of corpus B": me.client.get(f"/api/bench/{world['b_sentence']}"),
        "document of corpus B in A's list": admin.client.get(
            f"/api/corpora/{a}/sentences?document_id={world['doc_b']}"
        ),
        "document of corpus B in A's export": adj.client.get(
            f"/api/corpora/{a}/export?document_id={world['doc_b']}"
        ),
        "document of corpus B on A's page": admin.client.get(
            f"/corpora/{a}?document={world['doc_b']}"
        ),
        "annotator that does not exist": _import(
            admin, f"{GOOD_GOLD}\n".encode(), kind="annotation", annotator="nobody"
        ),
        "assign to nobody": admin.client.post(
            f"/api/corpora/{b}/assign", headers=admin.headers(), json={"usernames": ["nobody"]}
        ),
    }
    wrong = {
        k: (r.status_code, r.text[:160])
        for k, r in answers.items()
        if r.status_code not in (404, 422)
    }
    assert not wrong, wrong
    assert "987654" in answers["corpus"].json()["detail"]
    assert counts(db) == before


def test_bad_input_settle_from_an_annotation_of_another_sentence(world, people, login) -> None:
    from tests.app.review_helpers import SENTENCE, TREE_A, TREE_B, submit_tree

    db, adj = world["db"], world["adj"]
    _, (review,) = make_corpus(db, [SENTENCE], name="Harbour C", labels=[], tags=[])
    assign(db, [review], people.ann1, people.ann2)
    submit_tree(world["me"], review.id, TREE_A)
    submit_tree(login("ann2"), review.id, TREE_B)
    other = db.scalar(select(Annotation.id).where(Annotation.sentence_id == world["s"].id))
    before = counts(db)
    resp = adj.client.post(
        f"/api/review/{review.id}/settle",
        headers=adj.headers(),
        json={"tree": TREE_A, "source_annotation_id": other},
    )
    assert resp.status_code == 422 and str(other) in resp.json()["detail"]
    missing = adj.client.post(
        f"/api/review/{review.id}/settle",
        headers=adj.headers(),
        json={"tree": TREE_A, "source_gold_id": 987654},
    )
    assert missing.status_code in (404, 422)
    assert counts(db) == before
    assert (
        db.scalar(select(func.count()).select_from(Event).where(Event.kind == "gold.settled")) == 0
    )


def test_bad_input_numbers_too_large_for_the_database(world) -> None:
    """2**40 fits SQLite but not a PostgreSQL integer column; 2**70 fits neither: 422 naming
    the parameter on both databases, never a 500."""
    admin, me, db = world["admin"], world["me"], world["db"]
    before = counts(db)
    for number in (2**40, 2**70):
        for url, name in (
            (f"/api/corpora/{number}", "corpus_id"),
            (f"/api/grammars?corpus_id={number}", "corpus_id"),
            (f"/api/bench/{number}", "sentence_id"),
        ):
            who = me if "bench" in url else admin
            resp = who.client.get(url)
            assert resp.status_code in (404, 422), (url, resp.status_code, resp.text[:200])
            if resp.status_code == 422:
                assert resp.json()["detail"][0]["loc"][-1] == name
    big = me.client.post(
        f"/api/bench/{world['s'].id}/revisions",
        headers=me.headers(),
        json={"base": 2**70, "tree": "(ROOT (NN x))"},
    )
    assert big.status_code in (409, 422)
    assert counts(db) == before
