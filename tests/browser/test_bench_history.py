"""The Bench's history of one's own revisions: listed newest first with what each changed, drawn
against the current tree, restored as a new revision (nothing overwritten), by mouse and by
keyboard; and the undo stack survives a reload. Checked against the database."""

from __future__ import annotations

from parser.trees import constituents, pos_tags, read_tree
from tests.browser.test_bench_cycle import shown_tree, stored, wait_saved, wait_tree
from tests.browser.test_bench_moves import MOVED, START, _open_at, _walk_to, deck  # noqa: F401

# the PP taken away from MOVED (dissolved: its words move up into the object NP)
DISSOLVED = (
    "(ROOT (S (NP (DT The) (NN mate)) (VP (VBD checked) (NP (DT the) (NN winch) "
    "(IN with) (NP (DT a) (NN torch)))) (. .)))"
)


def _history_items(page) -> list[list[str]]:
    return page.eval_on_selector_all(
        "#history-list li",
        "els => els.map(e => [e.dataset.number, e.querySelector('.what').textContent])",
    )


def _marked_in_history(page) -> int:
    return page.locator("#history-tree g.tw-diff-only").count()


def _expected_marks(old: str, current: str) -> int:
    a, b = read_tree(old), read_tree(current)
    brackets = set(constituents(a)[1:]) - set(constituents(b)[1:])
    tags = sum(x != y for x, y in zip(pos_tags(a), pos_tags(b), strict=True))
    return len(brackets) + tags


def _start_and_move(page, live_server, deck) -> None:  # noqa: F811
    """START saved, then its PP moved under the object NP by keyboard (MOVED saved)."""
    _open_at(page, live_server, deck, START)
    page.focus("#tree-pane")
    _walk_to(page, START, "PP", 5, 8)
    page.keyboard.press("m")
    _walk_to(page, START, "NP", 3, 5)
    page.keyboard.press("m")
    wait_tree(page, MOVED)
    wait_saved(page)


def test_bench_history_lists_diffs_and_restores(browser_page, live_server, deck) -> None:  # noqa: F811
    page = browser_page
    kb = page.keyboard
    _start_and_move(page, live_server, deck)  # revisions 1 and 2
    _walk_to(page, MOVED, "PP", 5, 8)
    kb.press("x")
    wait_tree(page, DISSOLVED)
    wait_saved(page)  # revision 3

    # keyboard: v opens the list, newest first, each with what it changed
    kb.press("v")
    page.wait_for_selector("#history:not([hidden])")
    items = _history_items(page)
    assert [n for n, _ in items] == ["3", "2", "1"]
    assert items[0][1] == "−PP 6-8"
    assert items[1][1] == "+NP 4-8, −NP 4-5"
    assert items[2][1] == "first save"
    assert "same as your current tree" in page.text_content("#history-diff")
    assert _marked_in_history(page) == 0
    kb.press("ArrowDown")
    kb.press("ArrowDown")  # revision 1
    assert "Revision 1 against your current tree" in page.text_content("#history-diff")
    assert _marked_in_history(page) == _expected_marks(START, DISSOLVED) == 2  # NP 4-5, PP
    kb.press("Enter")
    wait_tree(page, START)
    wait_saved(page)
    _ann, revs = stored(live_server, deck["user_id"], deck["sentence_id"])
    assert [r.number for r in revs] == [1, 2, 3, 4]  # appended, nothing overwritten
    assert [read_tree(r.tree) for r in revs] == [
        read_tree(t) for t in (START, MOVED, DISSOLVED, START)
    ]
    assert revs[-1].source == "restore"

    # mouse: the History button, a click on revision 2, the Restore button
    page.click("[data-cmd='history']")
    page.wait_for_selector("#history:not([hidden])")
    page.click("#history-list li[data-number='2']")
    assert _marked_in_history(page) == _expected_marks(MOVED, START)
    page.click("#history-restore")
    wait_tree(page, MOVED)
    wait_saved(page)
    _ann, revs = stored(live_server, deck["user_id"], deck["sentence_id"])
    assert len(revs) == 5 and read_tree(revs[-1].tree) == read_tree(MOVED)
    assert revs[-1].source == "restore"


def test_bench_undo_survives_a_reload(browser_page, live_server, deck) -> None:  # noqa: F811
    page = browser_page
    kb = page.keyboard
    _start_and_move(page, live_server, deck)
    page.reload()
    page.wait_for_selector("#bench[data-ready='1']")
    assert shown_tree(page) == MOVED
    assert page.is_enabled("[data-cmd='undo']")
    page.focus("#tree-pane")
    kb.press("u")  # the move, made before the reload, is undone
    wait_tree(page, START)
    wait_saved(page)
    kb.press("U")  # and redone
    wait_tree(page, MOVED)
    wait_saved(page)
    _ann, revs = stored(live_server, deck["user_id"], deck["sentence_id"])
    assert [read_tree(r.tree) for r in revs[-2:]] == [read_tree(START), read_tree(MOVED)]
