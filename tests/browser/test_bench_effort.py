"""The Bench measures time on task and counts edit actions by kind, and stores them with each
revision: checked in the database after a few edits, with a two-minute pause (the page's clock
moved on) that must not count as active time."""

from __future__ import annotations

from sqlalchemy import select

from app.models import Annotation, Revision
from tests.app.bench_helpers import flat_text
from tests.browser.test_bench_cycle import wait_saved, wait_tree
from tests.browser.test_bench_moves import (  # noqa: F401
    MOVED,
    SENTENCE,
    START,
    _open_at,
    _walk_to,
    deck,
)

# the page's performance.now() can be moved forward by the test (an idle pause without waiting)
SHIFTABLE_CLOCK = """
(() => { const real = performance.now.bind(performance); window.__clockShift = 0;
         performance.now = () => real() + window.__clockShift; })();
"""


def test_bench_counts_actions_and_active_time(browser_page, live_server, deck) -> None:  # noqa: F811
    page = browser_page
    page.add_init_script(SHIFTABLE_CLOCK)
    kb = page.keyboard
    _open_at(page, live_server, deck, START)  # one "text" action
    page.focus("#tree-pane")
    _walk_to(page, START, "PP", 5, 8)
    kb.press("m")
    _walk_to(page, START, "NP", 3, 5)
    kb.press("m")  # one "move"
    wait_tree(page, MOVED)
    wait_saved(page)
    page.evaluate("() => { window.__clockShift += 120000; }")  # two minutes away
    kb.press("u")  # one "undo"
    wait_tree(page, START)
    wait_saved(page)
    kb.press("r")  # relabel the chosen node: one "relabel"
    page.wait_for_selector("#prompt:not([hidden])")
    page.fill("#prompt-input", "NP-SBJ")
    page.press("#prompt-input", "Enter")
    wait_saved(page)
    with live_server.sessionmaker() as db:
        ann = db.scalar(select(Annotation).where(Annotation.sentence_id == deck["sentence_id"]))
        revs = db.scalars(select(Revision).where(Revision.annotation_id == ann.id)).all()
        totals: dict[str, int] = {}
        for r in revs:
            for kind, n in r.actions.items():
                totals[kind] = totals.get(kind, 0) + n
        seconds = sum(r.active_seconds for r in revs)
        assert ann.start_tree == flat_text(SENTENCE.split(), ["XX"] * 9)
    assert totals == {"text": 1, "move": 1, "undo": 1, "relabel": 1}
    # the test ran for well under a minute of inputs; the two-minute pause is left out
    assert 0 < seconds < 60
