"""Refused trees say what and where: brackets (line/column), words, labels, pins, bodies."""

from __future__ import annotations

import pytest
from sqlalchemy import func, select

from app.models import Revision
from tests.app.bench_helpers import assign, flat_text, make_corpus


@pytest.fixture
def bench(db, people, login):
    _, sentences = make_corpus(db)
    assign(db, sentences, people.ann1)
    me = login("ann1")
    s = sentences[3]  # Who signed off the ramp inspection ?

    def save(tree, base=0, **extra):
        return me.client.post(
            f"/api/bench/{s.id}/revisions",
            headers=me.headers(),
            json={"base": base, "tree": tree, **extra},
        )

    save.sentence = s
    save.me = me
    return save


GOOD = (
    "(ROOT (SBARQ (WHNP (WP Who)) (SQ (VP (VBD signed) (PRT (RP off)) "
    "(NP (DT the) (NN ramp) (NN inspection)))) (? ?)))"
)


def _no_revisions(db) -> bool:
    db.expire_all()
    return db.scalar(select(func.count()).select_from(Revision)) == 0


def test_annotation_bad_brackets_answer_line_and_column(bench, db) -> None:
    text = "(ROOT (SBARQ (WHNP (WP Who))\n  (SQ (VP (VBD signed))) ) ) (PRT"
    resp = bench(text)
    assert resp.status_code == 422
    body = resp.json()
    assert body["kind"] == "brackets"
    # the tree closes at line 2; the text after it starts at column 30 (counted by hand)
    assert (body["line"], body["column"]) == (2, 30)
    assert body["detail"].startswith("line 2, column 30:")
    assert _no_revisions(db)


def test_annotation_stray_closing_bracket_is_located(bench) -> None:
    resp = bench("(ROOT (NN Who)))")
    assert resp.status_code == 422
    assert resp.json()["kind"] == "brackets"
    assert (resp.json()["line"], resp.json()["column"]) == (1, 16)


def test_annotation_word_mismatch_names_the_position(bench, db) -> None:
    resp = bench(GOOD.replace("(NN ramp)", "(NN rump)"))
    assert resp.status_code == 422
    body = resp.json()
    assert body["kind"] == "words"
    assert body["position"] == 4 and body["expected"] == "ramp" and body["found"] == "rump"
    assert "word 5" in body["detail"]
    assert _no_revisions(db)


def test_annotation_missing_and_extra_words_are_refused(bench) -> None:
    short = bench(GOOD.replace(" (? ?)", ""))
    assert short.status_code == 422 and short.json()["kind"] == "words"
    assert short.json()["position"] == 6 and short.json()["found"] is None
    long = bench(GOOD.replace("(? ?)", "(? ?) (. .)"))
    assert long.status_code == 422 and long.json()["kind"] == "words"
    assert long.json()["position"] == 7 and long.json()["expected"] is None


def test_annotation_tree_must_have_a_constituent_over_tags(bench) -> None:
    resp = bench("(NN Who)")
    assert resp.status_code == 422 and resp.json()["kind"] == "shape"


def test_annotation_unknown_label_needs_confirmation(bench, db) -> None:
    text = GOOD.replace("(PRT (RP off))", "(PARTICLE (RP off))")
    first = bench(text)
    assert first.status_code == 422
    assert first.json()["kind"] == "labels"
    assert first.json()["labels"] == ["PARTICLE"] and first.json()["can_confirm"] is True
    assert _no_revisions(db)
    ok = bench(text, confirm_labels=True)
    assert ok.status_code == 201, ok.text


def test_annotation_unknown_tag_is_checked_too(bench) -> None:
    resp = bench(GOOD.replace("(RP off)", "(PARTICLE off)"))
    assert resp.status_code == 422 and resp.json()["labels"] == ["PARTICLE"]


def test_annotation_unknown_label_refused_when_corpus_says_so(db, people, login) -> None:
    _, sentences = make_corpus(db, ["Engine hours ."], name="Strict", policy="refuse")
    assign(db, sentences, people.ann1)
    me = login("ann1")
    resp = me.client.post(
        f"/api/bench/{sentences[0].id}/revisions",
        headers=me.headers(),
        json={
            "base": 0,
            "tree": "(ROOT (BLOB (NN Engine) (NNS hours) (. .)))",
            "confirm_labels": True,
        },
    )
    assert resp.status_code == 422
    assert resp.json()["kind"] == "labels" and resp.json()["can_confirm"] is False
    assert "BLOB" in resp.json()["detail"]


def test_annotation_flat_placeholder_tag_is_allowed(bench) -> None:
    resp = bench(flat_text(bench.sentence.tokens, ["XX"] * 7))
    assert resp.status_code == 201, resp.text


def test_annotation_pins_must_be_in_the_tree(bench, db) -> None:
    wrong_span = bench(GOOD, pins={"spans": [[2, 5, "NP"]], "tags": []})
    assert wrong_span.status_code == 422 and wrong_span.json()["kind"] == "pins"
    wrong_tag = bench(GOOD, pins={"spans": [], "tags": [[0, "NN"]]})
    assert wrong_tag.status_code == 422 and wrong_tag.json()["kind"] == "pins"
    outside = bench(GOOD, pins={"spans": [], "tags": [[99, "NN"]]})
    assert outside.status_code == 422
    assert _no_revisions(db)
    ok = bench(GOOD, pins={"spans": [[3, 6, "NP"], [0, 1, "WHNP"]], "tags": [[0, "WP"]]})
    assert ok.status_code == 201, ok.text
    # stored sorted by start, longest first
    assert ok.json()["revision"]["pins"]["spans"] == [[0, 1, "WHNP"], [3, 6, "NP"]]


@pytest.mark.parametrize(
    "body",
    [
        None,
        {},
        {"base": 0},
        {"tree": GOOD},
        {"base": "zero", "tree": GOOD},
        {"base": -1, "tree": GOOD},
        {"base": 0, "tree": GOOD, "source": "magic"},
        {"base": 0, "tree": GOOD, "pins": {"spans": [[1, "x", "NP"]]}},
        {"base": 0, "tree": 17},
        {"base": 0, "tree": ""},
        {"base": 0, "tree": "   \n "},
        {"base": 0, "tree": "(ROOT"},
        {"base": 0, "tree": "(ROOT (S (NN a)) (S (NN b)))"},
        {"base": 0, "tree": "(ROOT (S (NN a))) (X (NN b))"},
        {"base": 0, "tree": ")"},
        {"base": 0, "tree": "(ROOT (S ( (NN a))))"},
    ],
)
def test_annotation_malformed_bodies_get_422_never_500(bench, body) -> None:
    me = bench.me
    url = f"/api/bench/{bench.sentence.id}/revisions"
    resp = (
        me.client.post(url, headers=me.headers(), content=b"")
        if body is None
        else me.client.post(url, headers=me.headers(), json=body)
    )
    assert resp.status_code == 422, resp.text
    assert resp.json()["detail"]


def test_annotation_non_utf8_body_gets_4xx(bench) -> None:
    me = bench.me
    resp = me.client.post(
        f"/api/bench/{bench.sentence.id}/revisions",
        headers={**me.headers(), "content-type": "application/json"},
        content=b'{"base": 0, "tree": "(ROOT \xff\xfe)"}',
    )
    assert 400 <= resp.status_code < 500
