"""The Search page in Chromium: each result's tree is drawn (static/js/treeview.js) with the
matching constituent marked and its words highlighted; the Findings page lists a finding with
the odd occurrence marked in its sentence. Trees are the invented ferry treebank of
tests/app/quality_helpers.py."""

from __future__ import annotations

from app.services import findings as finding_svc
from tests.app.quality_helpers import import_gold
from tests.browser.conftest import login_as


def test_search_page_draws_the_tree_with_the_match_marked(
    live_server, browser_page, db, people, output_dir
):
    corpus, _ = import_gold(db)
    # corpora are read by their members only; ann1 has no sentence of this one assigned
    corpus.settings = {**corpus.settings, "visible_to_everyone": True}
    db.commit()
    page = browser_page
    login_as(page, live_server.base_url, "ann1", next_path="/search")
    page.fill("input[name=pattern]", "(ADJP ...)")
    page.click("#sr-form button[type=submit]")
    page.wait_for_selector(".sr-hit svg")
    page.screenshot(path=str(output_dir / "search.png"), full_page=True)
    assert page.locator(".sr-hit").count() == 1
    marked = page.locator(".sr-hit svg .tw-node.sr-match .tw-label")
    assert marked.all_text_contents() == ["ADJP"]
    # the drawn tree is the gold tree of the result
    assert page.locator(".sr-hit svg").get_attribute("data-tree").startswith("(ROOT (S (ADJP")
    assert page.locator(".sr-hit mark").text_content() == "the old pump"
    assert [e for e in page.console_errors if "favicon.ico" not in e] == []


def test_findings_page_lists_the_finding_and_keeps_it_fine(
    live_server, browser_page, db, people, output_dir
):
    corpus, _ = import_gold(db)
    finding_svc.run_now(db, corpus.id, reason="test")
    page = browser_page
    login_as(page, live_server.base_url, "adj", next_path=f"/findings?corpus={corpus.id}")
    item = page.locator(".qf-finding", has_text="the old pump")
    assert item.locator("tbody tr").first.locator("mark").text_content() == "the old pump"
    assert item.locator("tbody tr").first.locator("td").first.text_content() == "ADJP"
    page.screenshot(path=str(output_dir / "findings.png"), full_page=True)
    item.locator("button[value=fine]").click()
    page.wait_for_selector(".notice:has-text('Kept as it is')")
    assert page.locator(".qf-finding", has_text="the old pump").count() == 0
    page.click("a:has-text('fine as is (1)')")
    assert page.locator(".qf-finding", has_text="the old pump").count() == 1
