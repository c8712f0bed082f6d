"""The Agreement page (figures, tables, charts), its CSV download, and the Grammars page
(versions, train now, learning curve)."""

from __future__ import annotations

import csv
import io
import re
from datetime import datetime, timedelta

from sqlalchemy import select

from app.models import GV_READY, GrammarVersion
from app.services import training
from app.services.agreement import MAX_DAYS_SHOWN, timeline
from app.services.charts import Point, Series, line_chart
from parser.scoring import Counts
from tests.app.bench_helpers import assign, make_corpus
from tests.app.review_helpers import (
    LABELS,
    SENTENCE,
    TAGS,
    TREE_A,
    TREE_B,
    import_demo_gold,
    submit_tree,
    wait_for_version,
)


def test_agreement_page_shows_figures_tables_and_charts(db, people, login):
    corpus, sentences = make_corpus(
        db, [SENTENCE, SENTENCE.replace("dawn", "noon")], labels=LABELS, tags=TAGS
    )
    assign(db, sentences, people.ann1, people.ann2)
    a1, a2 = login("ann1"), login("ann2")
    submit_tree(a1, sentences[0].id, TREE_A)
    submit_tree(a2, sentences[0].id, TREE_B)
    submit_tree(a1, sentences[1].id, TREE_A.replace("dawn", "noon"))
    submit_tree(a2, sentences[1].id, TREE_A.replace("dawn", "noon"))
    page = a1.client.get(f"/agreement?corpus={corpus.id}")
    assert page.status_code == 200
    html = page.text
    # pooled: matched 5 + 6 of (6 + 7) + (6 + 6) brackets -> 2 * 11 / 25 = 0.880
    assert re.search(r'id="ag-f1">0\.880<', html)
    assert "Ann1 – Ann2" in html
    # per label, worst first: ADVP (F1 0) comes before PP (2/3) and before S (1.0)
    rows = re.findall(r'<tr><td class="mono">([A-Z]+)</td>', html)
    assert rows.index("ADVP") < rows.index("PP") < rows.index("S")
    assert '<td class="mono">ADVP</td><td class="mono">PP</td><td class="num">1</td>' in html
    assert html.count('<svg class="chart"') == 2  # over time, learning curve
    assert "<script" not in html.split("<main", 1)[1].split("</main>", 1)[0]
    assert ' style="' not in html  # the CSP forbids inline styles


def test_agreement_csv_downloads_the_log(db, people, login):
    corpus, [s] = make_corpus(db, [SENTENCE], name="Quay =notes", labels=LABELS, tags=TAGS)
    assign(db, [s], people.ann1, people.ann2)
    submit_tree(login("ann1"), s.id, TREE_A)
    submit_tree(login("ann2"), s.id, TREE_B)
    resp = login("adj").client.get(f"/agreement/log.csv?corpus={corpus.id}")
    assert resp.status_code == 200 and resp.headers["content-type"].startswith("text/csv")
    assert "attachment" in resp.headers["content-disposition"]
    [row] = list(csv.DictReader(io.StringIO(resp.text)))
    assert row["annotator_a"] == "Ann1" and row["annotator_b"] == "Ann2"
    assert (row["matched"], row["count_a"], row["count_b"]) == ("5", "6", "7")
    assert row["labelled_f1"] == f"{10 / 13:.4f}"


def test_agreement_page_without_records_says_so(db, people, login):
    corpus, _ = make_corpus(db, [SENTENCE], labels=LABELS, tags=TAGS)
    html = login("adj").client.get(f"/agreement?corpus={corpus.id}").text
    assert "nothing has been compared" in html


def test_timeline_switches_to_weeks_for_a_long_log():
    start = datetime(2026, 3, 2)  # a Monday
    few = {start + timedelta(days=i): [Counts(1, 2, 2)] for i in range(5)}
    assert timeline(few)[0] == "day" and len(timeline(few)[1]) == 5
    many = {start + timedelta(days=i): [Counts(1, 2, 2)] for i in range(MAX_DAYS_SHOWN + 4)}
    period, rows = timeline(many)
    assert period == "week" and len(rows) == 5  # 35 days from a Monday: 5 weeks
    assert rows[0].records == 7 and rows[0].counts == Counts(7, 14, 14)


def test_line_chart_escapes_and_places_points():
    svg = line_chart([Series("<x>", [Point(0, 0.0), Point(10, 1.0)])], title="t & u", x_title="n")
    assert "&lt;x&gt;" in svg and "t &amp; u" in svg
    # y = 1.0 is drawn at the top of the plot (16), y = 0.0 at its bottom (260 - 40)
    assert re.search(r'cy="16\.0"', svg) and re.search(r'cy="220\.0"', svg)
    assert "no data yet" in line_chart([], title="t", x_title="n")


def test_grammars_page_lists_versions_and_trains_on_demand(app, db, people, login):
    corpus = import_demo_gold(db, settings={"retrain_every": 0})
    first = training.run_training(app.state.sessionmaker, corpus.id, reason="seed")
    adj = login("adj")
    html = adj.client.get(f"/grammars?corpus={corpus.id}").text
    assert f'data-version="{first.id}" data-status="ready"' in html
    assert "active</span>" in html and f"{first.heldout_f1:.3f}" in html
    # with its 95% interval (app.services.heldout_gate)
    held = first.options["heldout"]
    assert f"{held['ci_low']:.3f}–{held['ci_high']:.3f}" in html
    assert 'id="gv-train-now"' in html and "Automatic training is off" in html
    resp = adj.client.post(
        "/grammars/train",
        data={"corpus_id": corpus.id, "csrf_token": adj.csrf},
        follow_redirects=False,
    )
    assert resp.status_code == 303 and "queued=2" in resp.headers["location"]
    second = db.scalar(select(GrammarVersion).where(GrammarVersion.number == 2))
    assert wait_for_version(db, second.id).status == GV_READY
    html = adj.client.get(f"/grammars?corpus={corpus.id}").text
    assert html.count("<tr class=") == 2
    # the learning curve has a point per scored version
    assert html.count('class="chart-dot chart-s2"') == 2


def test_grammars_page_has_no_train_button_for_annotators(app, db, people, login):
    corpus = import_demo_gold(db)
    ann = login("ann1")
    html = ann.client.get(f"/grammars?corpus={corpus.id}").text
    assert 'id="gv-train-now"' not in html
    resp = ann.client.post(
        "/grammars/train",
        data={"corpus_id": corpus.id, "csrf_token": ann.csrf},
        headers={"accept": "text/html"},
        follow_redirects=False,
    )
    assert resp.status_code == 403
