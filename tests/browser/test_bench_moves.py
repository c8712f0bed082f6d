"""Moving a constituent with its subtree on the Bench, by drag and by keyboard (take, walk, put
down): the saved revision in the database is the intended tree; a move that would reorder the
words is refused with the reason; undo takes a move back and saves that too."""

from __future__ import annotations

from typing import Any

import pytest
from sqlalchemy import select

from app.models import User
from parser.trees import constituents, read_tree
from tests.app.bench_helpers import assign, make_corpus
from tests.browser.conftest import login_as
from tests.browser.test_bench_cycle import LABELS, TAGS, shown_tree, stored, wait_saved, wait_tree

SENTENCE = "The mate checked the winch with a torch ."
START = (
    "(ROOT (S (NP (DT The) (NN mate)) (VP (VBD checked) (NP (DT the) (NN winch)) "
    "(PP (IN with) (NP (DT a) (NN torch)))) (. .)))"
)
# the PP goes under the object NP
MOVED = (
    "(ROOT (S (NP (DT The) (NN mate)) (VP (VBD checked) (NP (DT the) (NN winch) "
    "(PP (IN with) (NP (DT a) (NN torch))))) (. .)))"
)
# and the full stop out of S, up to ROOT
STOP_UP = (
    "(ROOT (S (NP (DT The) (NN mate)) (VP (VBD checked) (NP (DT the) (NN winch) "
    "(PP (IN with) (NP (DT a) (NN torch)))))) (. .))"
)


@pytest.fixture
def deck(live_server) -> dict[str, Any]:
    with live_server.sessionmaker() as db:
        _corpus, sentences = make_corpus(db, [SENTENCE], labels=LABELS, tags=TAGS)
        ann1 = db.scalar(select(User).where(User.username == "ann1"))
        assign(db, sentences, ann1)
        return {"sentence_id": sentences[0].id, "user_id": ann1.id}


def _open_at(page, live_server, deck, tree: str) -> None:
    login_as(page, live_server.base_url, "ann1", next_path=f"/bench/{deck['sentence_id']}")
    page.wait_for_selector("#bench[data-ready='1']", timeout=60_000)
    page.fill("#tree-text", tree)
    page.click("[data-cmd='apply-text']")
    wait_tree(page, tree)
    wait_saved(page)
    page.evaluate("() => window.scrollTo(0, 0)")  # the text panel is below the tree


def _saved_tree(live_server, deck) -> str:
    _ann, revs = stored(live_server, deck["user_id"], deck["sentence_id"])
    return revs[-1].tree


def _label_centre(page, tree: str, label: str, start: int, end: int) -> tuple[float, float]:
    idx = constituents(read_tree(tree)).index((label, start, end))
    box = page.locator(f"#tree-pane g.tw-phrase[data-index='{idx}'] rect.tw-box").bounding_box()
    return box["x"] + box["width"] / 2, box["y"] + box["height"] / 2


def _drag(page, a: tuple[float, float], b: tuple[float, float]) -> None:
    page.mouse.move(*a)
    page.mouse.down()
    page.mouse.move(*b, steps=8)
    page.mouse.up()


def test_bench_move_by_dragging_a_label(browser_page, live_server, deck) -> None:
    page = browser_page
    _open_at(page, live_server, deck, START)
    pp = _label_centre(page, START, "PP", 5, 8)
    page.mouse.move(*pp)
    page.mouse.down()
    page.mouse.move(pp[0] + 30, pp[1] - 30, steps=4)
    # while dragging, only the order-keeping targets are marked: S and the object NP
    offered = page.eval_on_selector_all(
        "#tree-pane g.tw-drop-ok", "els => els.map(e => Number(e.dataset.index))"
    )
    spans = constituents(read_tree(START))
    assert sorted(spans[i] for i in offered) == [("NP", 3, 5), ("S", 0, 9)]
    page.mouse.move(*_label_centre(page, START, "NP", 3, 5), steps=6)
    page.mouse.up()
    wait_tree(page, MOVED)
    wait_saved(page)
    assert read_tree(_saved_tree(live_server, deck)) == read_tree(MOVED)

    # a drag onto a phrase that cannot take it: refused with the reason, nothing changes
    _drag(page, _label_centre(page, MOVED, "PP", 5, 8), _label_centre(page, MOVED, "NP", 0, 2))
    page.wait_for_selector("#bench-message[data-kind='warn']")
    assert "does not reach" in page.text_content("#bench-message")
    assert shown_tree(page) == MOVED

    # undo takes the move back, and that is saved as a revision too
    page.click("[data-cmd='undo']")
    wait_tree(page, START)
    wait_saved(page)
    assert read_tree(_saved_tree(live_server, deck)) == read_tree(START)


def _walk_to(page, tree: str, label: str, start: int, end: int) -> None:
    """Choose a phrase with j presses from the root (pre-order over phrases and tags)."""
    page.keyboard.press("Home")
    idx = constituents(read_tree(tree)).index((label, start, end))
    for _ in range(60):
        if page.locator(f"#tree-pane g.tw-phrase.tw-selected[data-index='{idx}']").count():
            return
        page.keyboard.press("j")
    raise AssertionError(f"{label} {start}-{end} not reached")


def test_bench_move_by_keyboard_take_walk_put_down(browser_page, live_server, deck) -> None:
    page = browser_page
    kb = page.keyboard
    _open_at(page, live_server, deck, START)
    page.focus("#tree-pane")
    _walk_to(page, START, "PP", 5, 8)
    kb.press("m")  # take it
    page.wait_for_selector("#tree-pane g.tw-carried")
    # walk to the subject: refused (not next to it), still carried
    _walk_to(page, START, "NP", 0, 2)
    kb.press("m")
    page.wait_for_selector("#bench-message[data-kind='warn']")
    assert "does not reach" in page.text_content("#bench-message")
    assert page.locator("#tree-pane g.tw-carried").count() == 1
    # walk to the object NP and put it down
    _walk_to(page, START, "NP", 3, 5)
    kb.press("Enter")
    wait_tree(page, MOVED)
    wait_saved(page)
    assert read_tree(_saved_tree(live_server, deck)) == read_tree(MOVED)
    # a word moves the same way: the full stop from S up to ROOT (chosen by its tag)
    kb.press("Home")
    for _ in range(40):
        if page.locator("#tree-pane g.tw-tag.tw-selected[data-index='8']").count():
            break
        kb.press("j")
    kb.press("m")
    kb.press("Home")
    kb.press("m")
    wait_tree(page, STOP_UP)
    wait_saved(page)
    assert read_tree(_saved_tree(live_server, deck)) == read_tree(STOP_UP)
    # Esc leaves a taken node where it was
    _walk_to(page, STOP_UP, "PP", 5, 8)
    kb.press("m")
    page.wait_for_selector("#tree-pane g.tw-carried")
    kb.press("Escape")
    page.wait_for_selector("#tree-pane g.tw-carried", state="detached")
    assert shown_tree(page) == STOP_UP
