"""Fixing tokens on the Bench by keyboard and by mouse: join, undo (the fix taken back), redo
(made again), split; each fix's revision counts it as a ``tokens`` action when it is made;
the database holds the new token versions with the old ones kept and the carried trees; the
other annotator's tree, made on the earlier tokens, is carried over and saved when they come
back; /bench/ID?tokens opens the fixer (the way in from a sentence held back for its tokens)."""

from __future__ import annotations

from sqlalchemy import select

from app.models import Annotation, Revision, Sentence, TokenVersion, User
from tests.app.bench_helpers import assign, make_corpus
from tests.app.test_annotation_tokens import JOINED, SPLIT, TREE
from tests.browser.conftest import login_as
from tests.browser.test_bench_cycle import LABELS, TAGS, shown_tree, wait_saved, wait_tree

SENTENCE = "Check the bilge pump before the first crossing ."


def _ready(page) -> None:
    page.wait_for_selector("#bench[data-ready='1']", timeout=60_000)


def _choose_tag(page, index: int) -> None:
    page.keyboard.press("Home")
    for _ in range(40):
        if page.locator(f"#tree-pane g.tw-tag.tw-selected[data-index='{index}']").count():
            return
        page.keyboard.press("j")
    raise AssertionError(f"tag {index} not reached")


def _head(live_server, username: str) -> Revision:
    with live_server.sessionmaker() as db:
        user = db.scalar(select(User).where(User.username == username))
        ann = db.scalar(select(Annotation).where(Annotation.user_id == user.id))
        return db.scalar(
            select(Revision).where(Revision.annotation_id == ann.id, Revision.number == ann.head)
        )


def _key_then_reload(page, key: str, tree: str) -> None:
    """Press ``key`` on the tree (a token fix or its undo or redo) and wait for the page to open
    again on ``tree``."""
    page.focus("#tree-pane")
    page.keyboard.press(key)
    page.wait_for_load_state("load")
    _ready(page)
    wait_tree(page, tree)


def _sentence(live_server) -> tuple[list[str], int, list[list[str]]]:
    with live_server.sessionmaker() as db:
        s = db.scalars(select(Sentence)).one()
        old = [v.tokens for v in db.scalars(select(TokenVersion).order_by(TokenVersion.number))]
        return list(s.tokens), s.token_version, old


def test_bench_fix_tokens_by_keyboard_and_mouse(browser, browser_page, live_server) -> None:
    with live_server.sessionmaker() as db:
        _corpus, sentences = make_corpus(db, [SENTENCE], labels=LABELS, tags=TAGS)
        users = db.scalars(select(User).where(User.username.in_(["ann1", "ann2"]))).all()
        assign(db, sentences, *users)
        sid = sentences[0].id
    # ann2 saves a tree on the imported tokens
    other = browser.new_context(viewport={"width": 1400, "height": 900})
    page2 = other.new_page()
    login_as(page2, live_server.base_url, "ann2", next_path=f"/bench/{sid}")
    _ready(page2)
    page2.fill("#tree-text", TREE)
    page2.click("[data-cmd='apply-text']")
    wait_saved(page2)

    page = browser_page
    kb = page.keyboard
    login_as(page, live_server.base_url, "ann1", next_path=f"/bench/{sid}")
    _ready(page)
    page.fill("#tree-text", TREE)
    page.click("[data-cmd='apply-text']")
    wait_tree(page, TREE)
    wait_saved(page)

    # keyboard: choose "bilge", t, Tab to "Join with the next word", Enter
    page.focus("#tree-pane")
    _choose_tag(page, 2)
    kb.press("t")
    page.wait_for_selector("#tokens:not([hidden])")
    assert page.input_value("#tokens-input") == "bilge"
    kb.press("Tab")
    kb.press("Tab")
    assert page.evaluate("() => document.activeElement.id") == "tokens-join"
    kb.press("Enter")
    page.wait_for_load_state("load")
    _ready(page)
    wait_tree(page, JOINED)
    assert page.text_content("#sentence-text") == "Check the bilgepump before the first crossing ."
    head = _head(live_server, "ann1")
    assert (head.tree, head.source, head.token_version) == (JOINED, "tokens", 2)
    assert head.actions == {"tokens": 1}  # counted with the fix, not at a later save
    tokens, version, old = _sentence(live_server)
    assert version == 2 and tokens[2] == "bilgepump" and old == [SENTENCE.split()]

    # undo takes the fix back: a third version, equal to the first
    _key_then_reload(page, "u", TREE)
    tokens, version, old = _sentence(live_server)
    assert tokens == SENTENCE.split() and version == 3 and len(old) == 2
    assert _head(live_server, "ann1").tree == TREE

    # redo makes the join again (a fourth version); undo takes it back once more (a fifth)
    _key_then_reload(page, "U", JOINED)
    head = _head(live_server, "ann1")
    assert (head.tree, head.token_version, head.actions) == (JOINED, 4, {"tokens": 1})
    assert _sentence(live_server)[0][2] == "bilgepump"
    _key_then_reload(page, "Control+z", TREE)
    tokens, version, old = _sentence(live_server)
    assert tokens == SENTENCE.split() and version == 5 and len(old) == 4

    # mouse: click the tag of "before", the Tokens button, type "be fore", Apply
    page.click("#tree-pane g.tw-tag[data-index='4']")
    page.click("[data-cmd='tokens']")
    page.fill("#tokens-input", "be fore")
    page.click("#tokens-apply")
    page.wait_for_load_state("load")
    _ready(page)
    wait_tree(page, SPLIT)
    head = _head(live_server, "ann1")
    assert (head.tree, head.token_version) == (SPLIT, 6)

    # ann2 comes back: their tree from the first tokens is carried through all five fixes
    page2.reload()
    _ready(page2)
    assert "earlier tokens" in page2.text_content("#start-note")
    wait_tree(page2, SPLIT)
    wait_saved(page2)
    head2 = _head(live_server, "ann2")
    assert (head2.tree, head2.source, head2.token_version) == (SPLIT, "tokens", 6)
    with live_server.sessionmaker() as db:
        first = db.scalars(
            select(Revision).where(Revision.number == 1, Revision.user_id == head2.user_id)
        ).one()
        assert (first.tree, first.token_version) == (TREE, 1)  # kept as made
    other.close()

    # holding back for wrong tokens offers the fixer instead
    page.select_option("#hold-reason", "tokenization wrong")
    page.click("#hold-go")
    page.wait_for_selector("#confirm:not([hidden])")
    page.click("#confirm-yes")
    page.wait_for_selector("#tokens:not([hidden])")
    page.keyboard.press("Escape")
    page.wait_for_selector("#tokens", state="hidden")

    # the way in from elsewhere opens the fixer at the first word
    page.goto(f"{live_server.base_url}/bench/{sid}?tokens")
    _ready(page)
    page.wait_for_selector("#tokens:not([hidden])")
    assert page.input_value("#tokens-input") == "Check"
    assert shown_tree(page) == SPLIT
