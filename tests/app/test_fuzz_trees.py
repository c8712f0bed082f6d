"""Hypothesis fuzzing of the bracketed reader and of the endpoints that take bracketed text.

The reader (``parser.trees``) may only give trees or raise a ParserError subclass; a
BracketSyntaxError must point inside the text; reading line by line (``iter_trees``) must
agree with reading the whole text. The tree-save API, the review check and the import API may
only answer their documented codes, never a 5xx, and a refused save writes nothing.

Inputs are valid trees broken by random edits (the interesting cases sit near valid text),
random text, and random JSON bodies.
"""

from __future__ import annotations

import json
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from app.models import Revision
from parser.errors import BracketSyntaxError, ParserError
from parser.trees import iter_trees, read_tree, read_trees, words, write_trees
from tests.app.bench_helpers import assign, flat_text, make_corpus
from tests.parser.test_trees_properties import trees_st

EDIT_CHARS = "()  \n\t\r\x00\u00a0\u2028Xé-"
FUZZ = settings(
    max_examples=150,
    deadline=None,
    database=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)


@st.composite
def broken(draw: st.DrawFn, base: st.SearchStrategy[str]) -> str:
    """``base`` text with up to four random edits: delete, insert, duplicate or cut."""
    text = draw(base)
    for _ in range(draw(st.integers(0, 4))):
        n = len(text)
        kind = draw(st.sampled_from(["delete", "insert", "duplicate", "cut"]))
        i = draw(st.integers(0, n))
        if kind == "delete" and n:
            i = min(i, n - 1)
            text = text[:i] + text[i + 1 :]
        elif kind == "insert":
            text = (
                text[:i]
                + draw(st.text(st.sampled_from(EDIT_CHARS), min_size=1, max_size=3))
                + text[i:]
            )
        elif kind == "duplicate":
            j = draw(st.integers(i, n))
            text = text[:j] + text[i:j] + text[j:]
        else:
            text = text[:i]
    return text


written = st.builds(
    lambda ts, indent: write_trees(ts, indent=indent),
    st.lists(trees_st, min_size=1, max_size=3),
    st.booleans(),
)
reader_inputs = st.one_of(broken(written), st.text(), broken(st.just("(ROOT (S (NN a)))")))


def _lines(text: str) -> list[str]:
    """``text`` split the way a file opened with ``newline=''`` splits, at ``\\n`` only."""
    parts = text.split("\n")
    return [p + "\n" for p in parts[:-1]] + ([parts[-1]] if parts[-1] else [])


def _outcome(read: Any) -> tuple[str, Any]:
    try:
        return "trees", list(read())
    except BracketSyntaxError as err:
        return "error", (err.line, err.column, err.message)


@FUZZ
@given(reader_inputs)
def test_fuzz_reader_gives_trees_or_a_located_syntax_error(text: str) -> None:
    try:
        trees = read_trees(text)
    except BracketSyntaxError as err:
        lines = text.split("\n")
        assert 1 <= err.line <= len(lines)
        assert 1 <= err.column <= len(lines[err.line - 1]) + 1
        assert err.message
        return
    except ParserError:
        return  # documented family; the reader raises only syntax errors today
    assert read_trees(write_trees(trees)) == trees


@FUZZ
@given(reader_inputs)
def test_fuzz_reading_line_by_line_agrees_with_reading_whole(text: str) -> None:
    assert _outcome(lambda: iter_trees(_lines(text))) == _outcome(lambda: read_trees(text))


@FUZZ
@given(reader_inputs)
def test_fuzz_single_tree_reader(text: str) -> None:
    try:
        tree = read_tree(text)
    except BracketSyntaxError as err:
        assert err.line >= 1 and err.column >= 1
        return
    assert read_trees(text) == [tree]


# --------------------------------------------------------------------------- the web API
SENTENCE = "The deck crew painted the winch before noon ."
GOOD_TREE = flat_text(SENTENCE.split(), ["DT", "NN", "NN", "VBD", "DT", "NN", "IN", "NN", "."])

json_values = st.recursive(
    st.none()
    | st.booleans()
    | st.integers(-(2**70), 2**70)
    | st.floats(allow_nan=False)
    | st.text(max_size=20),
    lambda kids: (
        st.lists(kids, max_size=4) | st.dictionaries(st.text(max_size=8), kids, max_size=4)
    ),
    max_leaves=12,
)
bodies = st.one_of(
    json_values,
    st.fixed_dictionaries({"base": json_values, "tree": json_values}),
    st.fixed_dictionaries(
        {"base": st.integers(-3, 3), "tree": broken(st.just(GOOD_TREE))},
        optional={"pins": json_values, "source": json_values, "confirm_labels": json_values},
    ),
)


@pytest.fixture
def bench(db, people, login) -> dict[str, Any]:
    _, sentences = make_corpus(db, [SENTENCE], policy="refuse")
    assign(db, sentences, people.ann1)
    return {"sid": sentences[0].id, "me": login("ann1"), "db": db}


@FUZZ
@given(body=bodies)
def test_fuzz_save_answers_only_documented_codes(bench, body: Any) -> None:
    me, sid, db = bench["me"], bench["sid"], bench["db"]
    before = db.scalar(select(func.count()).select_from(Revision))
    resp = me.client.post(
        f"/api/bench/{sid}/revisions", headers=me.headers(), content=json.dumps(body)
    )
    assert resp.status_code in (201, 409, 422), (resp.status_code, resp.text[:300])
    db.expire_all()
    after = db.scalar(select(func.count()).select_from(Revision))
    if resp.status_code != 201:
        assert after == before, "a refused save wrote a revision"
        answer = resp.json()
        if answer.get("kind") == "brackets":
            assert answer["line"] >= 1 and answer["column"] >= 1
        return
    assert after == before + 1
    stored = resp.json()["revision"]["tree"]
    assert words(read_tree(stored)) == SENTENCE.split()


@FUZZ
@given(text=st.one_of(broken(st.just(GOOD_TREE)), st.text(max_size=200)))
def test_fuzz_save_tree_text_is_stored_only_when_it_fits(bench, text: str) -> None:
    me, sid = bench["me"], bench["sid"]
    head = me.client.get(f"/api/bench/{sid}").json()["annotation"]["head"]
    resp = me.client.post(
        f"/api/bench/{sid}/revisions", headers=me.headers(), json={"base": head, "tree": text}
    )
    assert resp.status_code in (201, 422), (resp.status_code, resp.text[:300])
    if resp.status_code == 201:
        assert words(read_tree(resp.json()["revision"]["tree"])) == SENTENCE.split()
    else:
        assert resp.json()["kind"] in ("brackets", "words", "labels", "shape", "pins")


@FUZZ
@given(text=st.one_of(broken(st.just(GOOD_TREE)), st.text(max_size=200)))
def test_fuzz_review_check_answers_200_or_422(bench, login, text: str) -> None:
    if "adj" not in bench:
        bench["adj"] = login("adj")
    adj = bench["adj"]
    resp = adj.client.post(
        f"/api/review/{bench['sid']}/check", headers=adj.headers(), json={"tree": text}
    )
    assert resp.status_code in (200, 422), (resp.status_code, resp.text[:300])


@settings(
    max_examples=40,
    deadline=None,
    database=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(
    data=st.one_of(
        st.binary(max_size=300), broken(written).map(lambda t: t.encode("utf-8", "surrogatepass"))
    ),
    kind=st.sampled_from(["text", "gold", "annotation"]),
)
def test_fuzz_import_answers_201_or_4xx(bench, login, data: bytes, kind: str) -> None:
    if "admin" not in bench:
        bench["admin"] = login("admin")
    admin = bench["admin"]
    resp = admin.client.post(
        "/api/corpora/import",
        headers=admin.headers(),
        data={"corpus_name": "Fuzzed", "kind": kind, "annotator": "ann1"},
        files={"upload": ("fuzz.txt", data, "text/plain")},
    )
    assert resp.status_code in (201, 404, 409, 413, 422), (resp.status_code, resp.text[:300])
