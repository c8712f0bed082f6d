"""The Bench and Queue pages as HTML: access, order, progress, escaping of sentence text."""

from __future__ import annotations

import json
import re

from fastapi.testclient import TestClient

from tests.app.bench_helpers import FERRY_SENTENCES, assign, flat_text, make_corpus


def _world(db, people):
    _, sentences = make_corpus(db)
    assign(db, sentences, people.ann1)
    return sentences


def test_annotation_pages_need_login(app, db, people) -> None:
    sentences = _world(db, people)
    client = TestClient(app)
    for path in ("/queue", "/bench", f"/bench/{sentences[0].id}"):
        resp = client.get(path, follow_redirects=False)
        assert resp.status_code == 303 and resp.headers["location"].startswith("/login?next=")


def test_annotation_bench_page_of_someone_elses_sentence_is_404(db, people, login) -> None:
    sentences = _world(db, people)
    me = login("ann2")
    resp = me.client.get(f"/bench/{sentences[0].id}", headers={"accept": "text/html"})
    assert resp.status_code == 404
    assert "not in your queue" in resp.text
    assert FERRY_SENTENCES[0] not in resp.text


def test_annotation_bench_page_embeds_its_data(db, people, login) -> None:
    sentences = _world(db, people)
    me = login("ann1")
    resp = me.client.get(f"/bench/{sentences[1].id}")
    assert resp.status_code == 200
    block = re.search(
        r'<script type="application/json" id="bench-data">(.*?)</script>', resp.text, re.S
    )
    data = json.loads(block.group(1))
    assert data["sentence"]["tokens"] == FERRY_SENTENCES[1].split()
    assert data["queue"]["index"] == 2 and data["source"] == "flat"
    assert '<script type="module" src="/static/js/bench.js">' in resp.text
    assert "style=" not in resp.text  # the CSP allows no inline styles


def test_annotation_hostile_text_is_escaped_in_pages(db, people, login) -> None:
    text = "Fuel </script><script>alert(1)</script> & <b>oil</b> ."
    _, sentences = make_corpus(db, [text], name="Hostile")
    assign(db, sentences, people.ann1)
    me = login("ann1")
    for path in (f"/bench/{sentences[0].id}", "/queue"):
        html = me.client.get(path).text
        assert "<script>alert(1)" not in html and "<b>oil</b>" not in html
        assert html.count("</script>") == html.count("<script")
    bench = me.client.get(f"/bench/{sentences[0].id}").text
    block = re.search(r'id="bench-data">(.*?)</script>', bench, re.S).group(1)
    assert json.loads(block)["sentence"]["text"] == text


def test_annotation_queue_page_shows_order_and_progress(db, people, login) -> None:
    sentences = _world(db, people)
    me = login("ann1")
    s0 = sentences[0]
    me.client.post(
        f"/api/bench/{s0.id}/revisions",
        headers=me.headers(),
        json={"base": 0, "tree": flat_text(s0.tokens)},
    )
    me.client.post(f"/api/bench/{s0.id}/submit", headers=me.headers(), json={"base": 1})
    s1 = sentences[1]
    me.client.post(
        f"/api/bench/{s1.id}/revisions",
        headers=me.headers(),
        json={"base": 0, "tree": flat_text(s1.tokens)},
    )
    html = me.client.get("/queue").text
    rows = re.findall(r'<tr class="queue-row ann-(\w+)" data-sentence-id="(\d+)">', html)
    assert rows == [
        ("submitted", str(sentences[0].id)),
        ("draft", str(sentences[1].id)),
        ("new", str(sentences[2].id)),
        ("new", str(sentences[3].id)),
    ]
    assert '<progress max="4" value="1">' in html
    assert "<b>1</b> of 4 handed in" in html
    assert f'id="continue" href="/bench/{sentences[1].id}"' in html
    assert "draft · 1 revision<" in html


def test_annotation_bench_without_target_goes_to_next_open(db, people, login) -> None:
    sentences = _world(db, people)
    me = login("ann1")
    me.client.patch(
        f"/api/bench/{sentences[0].id}/note",
        headers=me.headers(),
        json={"flag": "not one sentence"},
    )
    resp = me.client.get("/bench", follow_redirects=False)
    assert resp.headers["location"] == f"/bench/{sentences[1].id}"


def test_annotation_queue_page_pages_and_filters_by_corpus(db, people, login) -> None:
    from app.routes.pages_queue import PER_PAGE

    many = [f"Line {i} of the log ." for i in range(PER_PAGE + 5)]
    _, long_sentences = make_corpus(db, many, name="Long log")
    _, other = make_corpus(db, ["Second corpus sentence ."], name="Other log")
    assign(db, long_sentences + other, people.ann1)
    me = login("ann1")
    first = me.client.get("/queue").text
    assert f"1–{PER_PAGE} of {PER_PAGE + 6}" in first and 'rel="prev"' not in first
    assert first.count('class="queue-row') == PER_PAGE
    later = re.search(r'href="(/queue\?after=[^"]+)" rel="next"', first)
    assert later is not None
    second = me.client.get(later.group(1)).text
    assert second.count('class="queue-row') == 6 and 'rel="next"' not in second
    assert f"{PER_PAGE + 1}–{PER_PAGE + 6} of {PER_PAGE + 6}" in second
    earlier = re.search(r'href="(/queue\?before=[^"]+)" rel="prev"', second)
    assert earlier is not None
    assert me.client.get(earlier.group(1)).text.count('class="queue-row') == PER_PAGE
    only_other = me.client.get(f"/queue?corpus={other[0].corpus_id}").text
    assert only_other.count('class="queue-row') == 1 and "Second corpus sentence" in only_other
    assert "Other log" in only_other


def test_annotation_empty_queue_says_so(login) -> None:
    me = login("ann2")
    html = me.client.get("/queue").text
    assert "No sentences are assigned to you yet" in html
    assert me.client.get("/bench", follow_redirects=False).headers["location"] == "/queue"
