"""The Grammars and Agreement pages in Chromium: "Train now" queues a job that trains in the
server's background process while the page follows its progress and shows the new active
version; the Agreement page draws its charts. Gold is the demo's invented ferry corpus."""

from __future__ import annotations

import pytest
from sqlalchemy import select

from app.models import GV_READY, GrammarVersion
from tests.app.bench_helpers import assign, make_corpus
from tests.app.review_helpers import (
    LABELS,
    SENTENCE,
    TAGS,
    TREE_A,
    TREE_B,
    import_demo_gold,
    submit_tree,
)
from tests.browser.conftest import login_as


@pytest.mark.server_process  # the training worker must be told from the server's own process
def test_train_now_runs_in_the_background_and_the_page_follows(
    live_server, browser_page, db, people, output_dir
):
    corpus = import_demo_gold(db, settings={"retrain_every": 0})
    # the import queued version 1 before the setting changed; the server's runner trains it
    page = browser_page
    login_as(page, live_server.base_url, "adj", next_path=f"/grammars?corpus={corpus.id}")
    page.wait_for_selector("tr[data-version] [data-field=status]:text('ready')", timeout=120_000)
    page.wait_for_selector("#gv-train-now:not([disabled])", timeout=120_000)
    page.click("#gv-train-now")
    page.wait_for_selector(".notice:has-text('Version 2 is queued')")
    second = db.scalar(select(GrammarVersion.id).where(GrammarVersion.number == 2))
    # the polling script reloads the page once version 2 is done: the server then draws it
    # as the active version, finished
    page.wait_for_selector(
        f"tr.gv-is-active[data-version='{second}'][data-progress='1.0']", timeout=120_000
    )
    page.screenshot(path=str(output_dir / "grammars.png"), full_page=True)
    db.expire_all()
    versions = db.scalars(select(GrammarVersion).order_by(GrammarVersion.number)).all()
    assert [v.status for v in versions] == [GV_READY, GV_READY]
    # trained in a worker process of the server, not in the server's own process
    assert versions[1].options["worker_pid"] != live_server.server.proc.pid
    assert page.locator(".chart .chart-dot").count() == 2  # the learning curve
    assert [e for e in page.console_errors if "favicon.ico" not in e] == []


def test_agreement_page_draws_its_charts(live_server, browser_page, db, people, login, output_dir):
    corpus, sentences = make_corpus(
        db, [SENTENCE, SENTENCE.replace("dawn", "noon")], labels=LABELS, tags=TAGS
    )
    assign(db, sentences, people.ann1, people.ann2)
    a1, a2 = login("ann1"), login("ann2")
    for s, word in zip(sentences, ("dawn", "noon"), strict=True):
        submit_tree(a1, s.id, TREE_A.replace("dawn", word))
        submit_tree(
            a2,
            s.id,
            TREE_B.replace("dawn", word) if word == "dawn" else TREE_A.replace("dawn", word),
        )
    page = browser_page
    login_as(page, live_server.base_url, "ann1", next_path=f"/agreement?corpus={corpus.id}")
    assert page.inner_text("#ag-f1") == "0.880"
    assert page.locator("#ag-over-time svg.chart circle.chart-dot").count() == 1
    box = page.locator("#ag-over-time svg.chart").bounding_box()
    assert box is not None and box["width"] > 300
    page.screenshot(path=str(output_dir / "agreement.png"), full_page=True)
    with page.expect_download() as dl:
        page.click("a[href^='/agreement/log.csv']")
    assert dl.value.suggested_filename == "ferry-log-agreement.csv"
