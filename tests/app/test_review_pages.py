"""The Review pages as HTML: the list, one sentence with both trees and the combined view,
the gold history after settling and reopening; and the span ladder's layout."""

from __future__ import annotations

import re
from dataclasses import dataclass

from app.services.charts import ladder_rows, span_ladder
from tests.app.bench_helpers import assign, make_corpus
from tests.app.review_helpers import LABELS, SENTENCE, TAGS, TREE_A, TREE_B, submit_tree


def _disagreement(db, people, login):  # type: ignore[no-untyped-def]
    corpus, [s] = make_corpus(db, [SENTENCE], labels=LABELS, tags=TAGS)
    assign(db, [s], people.ann1, people.ann2)
    submit_tree(login("ann1"), s.id, TREE_A)
    submit_tree(login("ann2"), s.id, TREE_B)
    return corpus, s


def test_review_page_shows_both_trees_and_the_combined_view(db, people, login):
    corpus, s = _disagreement(db, people, login)
    adj = login("adj")
    listing = adj.client.get(f"/review?corpus={corpus.id}")
    assert listing.status_code == 200
    assert f'href="/review/{s.id}"' in listing.text and "0.769" in listing.text  # 10/13
    page = adj.client.get(f"/review/{s.id}")
    assert page.status_code == 200
    html = page.text
    assert 'id="tree-A"' in html and 'id="tree-B"' in html
    assert ">Ann1<" in html and ">Ann2<" in html  # the adjudicator sees who drew which
    assert html.count('class="lad-span lad-all"') == 5  # S, NP(0,2), VP, NP(3,5), NP(6,7)
    # PP and ADVP over "at dawn": same span, different labels
    assert re.search(r'lad-split" data-start="5" data-end="7"', html)
    # NP(3,7) only in B
    assert re.search(r'lad-some" data-start="3" data-end="7"', html)
    assert "ADVP·B" in html and "PP·A" in html
    assert 'id="rv-settle"' in html and "Shift+S" in html


def test_settled_page_shows_history_and_reopen(db, people, login):
    corpus, s = _disagreement(db, people, login)
    adj = login("adj")
    adj.client.post(
        f"/api/review/{s.id}/settle",
        json={"tree": TREE_A, "note": "time adjunct <b>on the VP</b>"},
        headers=adj.headers(),
    )
    page = adj.client.get(f"/review/{s.id}").text
    assert 'id="rv-reopen"' in page and 'id="rv-settle"' not in page
    assert "adjudication by Adj" in page
    assert "&lt;b&gt;on the VP&lt;/b&gt;" in page  # the note is text, not markup
    adj.client.post(f"/api/review/{s.id}/reopen", json={}, headers=adj.headers())
    page = adj.client.get(f"/review/{s.id}").text
    assert "retired" in page and 'id="rv-settle"' in page
    assert 'data-take-gold="' in page


def test_annotators_get_no_review_pages(db, people, login):
    corpus, s = _disagreement(db, people, login)
    ann = login("ann2")
    assert ann.client.get("/review", headers={"accept": "text/html"}).status_code == 403


@dataclass
class _Label:
    label: str
    owners: list[str]


@dataclass
class _Span:
    start: int
    end: int
    kind: str
    labels: list[_Label]


def test_ladder_puts_parents_above_children_and_crossing_spans_apart():
    spans = [
        _Span(0, 4, "all", [_Label("S", ["A", "B"])]),
        _Span(0, 2, "some", [_Label("NP", ["A"])]),
        _Span(1, 3, "some", [_Label("NP", ["B"])]),  # crosses (0, 2)
        _Span(2, 4, "all", [_Label("VP", ["A", "B"])]),
    ]
    rows = ladder_rows(spans)
    assert rows[1] == 1 and rows[3] == 1  # (0,2) and (2,4) touch but do not overlap
    assert rows[2] == 2  # overlaps (0,2) and (2,4) on row 1
    assert rows[0] == 3  # above everything it contains
    svg = span_ladder(["a", "b", "<c>", "d"], spans, 2)
    assert "&lt;c&gt;" in svg and "<c>" not in svg
    assert svg.count("<rect") == 4
