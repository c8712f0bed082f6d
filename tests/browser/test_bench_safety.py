"""The Bench never loses work and never runs text as markup: hostile words show as text, a
stale save shows both sides and keeps the local change, a failed save survives a reload, bad
bracketed text is located, labels outside the set are confirmed or refused, and a 60-word
tree is drawn without overlaps."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select

from app.models import Annotation, Revision, User
from parser.errors import BracketSyntaxError
from parser.trees import read_tree
from tests.app.bench_helpers import (
    assign,
    flat_text,
    gum_grammar_bytes,
    install_grammar,
    make_corpus,
)
from tests.app.conftest import PASSWORD
from tests.app.live_server import Client
from tests.browser.conftest import login_as
from tests.browser.test_bench_cycle import answer_prompt, click_phrase, shown_tree, wait_saved

HOSTILE = [
    "Fuel",
    "&",
    "oil",
    "<script>",
    "<b>filters</b>",
    "<img/src=x/onerror=alert(1)>",
    "&amp;",
    ".",
]


def seed(live_server, texts: list[str], *, grammar: bool = False, **corpus: Any) -> dict:
    with live_server.sessionmaker() as db:
        c, sentences = make_corpus(db, texts, **corpus)
        user = db.scalar(select(User).where(User.username == "ann1"))
        assign(db, sentences, user)
        if grammar:
            install_grammar(db, c, gum_grammar_bytes())
        return {
            "ids": [s.id for s in sentences],
            "user_id": user.id,
            "tokens": [s.tokens for s in sentences],
        }


def open_bench(page, live_server, sentence_id: int) -> None:
    login_as(page, live_server.base_url, "ann1", next_path=f"/bench/{sentence_id}")
    page.wait_for_selector("#bench[data-ready='1']", timeout=60_000)


def revisions(live_server, user_id: int, sentence_id: int) -> list[Revision]:
    with live_server.sessionmaker() as db:
        ann = db.scalar(
            select(Annotation).where(
                Annotation.user_id == user_id, Annotation.sentence_id == sentence_id
            )
        )
        if ann is None:
            return []
        return list(
            db.scalars(
                select(Revision).where(Revision.annotation_id == ann.id).order_by(Revision.number)
            )
        )


def retag_first_word(page, tag: str) -> None:
    """By keyboard: root, down to S, down to the first POS tag, relabel it."""
    for key in ("Home", "ArrowDown", "ArrowDown", "r"):
        page.keyboard.press(key)
    answer_prompt(page, tag)


def test_bench_hostile_words_show_as_text(browser_page, live_server) -> None:
    page = browser_page
    world = seed(live_server, [" ".join(HOSTILE)], labels=[], tags=[])
    dialogs: list[str] = []
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    open_bench(page, live_server, world["ids"][0])
    shown = page.eval_on_selector_all(
        "#tree-pane g.tw-word text", "els => els.map(e => e.textContent)"
    )
    assert shown == [w.replace("(", "(").replace(")", ")") for w in HOSTILE]
    assert page.inner_text("#sentence-text") == " ".join(HOSTILE)
    # nothing became an element: no <b>, no <img>, and the only scripts are the page's own
    assert page.locator("#bench b:not(#queue-submitted), #bench img").count() == 0
    assert page.eval_on_selector_all("script", "els => els.map(e => e.type || 'classic')") == [
        "application/json",
        "module",
    ]
    assert "<script>" in page.input_value("#tree-text")
    # the queue page shows the same text escaped
    page.goto(f"{live_server.base_url}/queue")
    assert page.inner_text(".queue-text") == " ".join(HOSTILE)
    assert page.locator(".queue-text b, .queue-text img").count() == 0
    assert dialogs == []
    assert [e for e in page.console_errors if "favicon" not in e] == []


def test_bench_stale_save_keeps_mine_or_takes_theirs(browser_page, live_server) -> None:
    page = browser_page
    world = seed(live_server, ["Check the bilge pump ."])
    sid, tokens = world["ids"][0], world["tokens"][0]
    open_bench(page, live_server, sid)
    # another tab (same annotator) saves first
    other = Client(live_server.base_url, "ann1", PASSWORD)
    theirs = flat_text(tokens, ["VB", "DT", "NN", "NN", "."])
    assert other.save(sid, 0, theirs).status_code == 201
    # this page's edit is now stale: add an NP over "the bilge pump"
    page.keyboard.press("Home")
    page.keyboard.press("ArrowDown")  # S
    page.keyboard.press("ArrowDown")  # first tag
    page.keyboard.press("ArrowRight")  # "the"
    page.keyboard.press("Shift+ArrowRight")
    page.keyboard.press("Shift+ArrowRight")
    page.keyboard.press("a")
    answer_prompt(page, "NP")
    mine = shown_tree(page)
    page.wait_for_selector("#conflict:not([hidden])")
    assert page.get_attribute("#save-state", "data-state") == "conflict"
    assert "Revision 1" in page.inner_text("#conflict-detail")
    assert page.text_content("#conflict-theirs") == theirs
    assert shown_tree(page) == mine  # the local change is still on screen
    assert [r.tree for r in revisions(live_server, world["user_id"], sid)] == [theirs]

    page.click("#conflict-keep")
    wait_saved(page)
    revs = revisions(live_server, world["user_id"], sid)
    assert [r.number for r in revs] == [1, 2] and revs[1].tree == mine

    # again, stale; this time take theirs, and undo brings mine back
    theirs2 = flat_text(tokens, ["VB", "DT", "JJ", "NN", "."])
    assert other.save(sid, 2, theirs2).status_code == 201
    retag_first_word(page, "NNP")
    mine2 = shown_tree(page)
    page.wait_for_selector("#conflict:not([hidden])")
    page.click("#conflict-take")
    page.wait_for_selector("#conflict", state="hidden")
    assert shown_tree(page) == theirs2
    assert page.get_attribute("#save-state", "data-state") == "saved"
    page.keyboard.press("u")
    page.wait_for_function(
        "t => document.querySelector('#tree-pane svg').dataset.tree === t", arg=mine2
    )
    wait_saved(page)
    revs = revisions(live_server, world["user_id"], sid)
    assert [r.tree for r in revs] == [theirs, mine, theirs2, mine2]
    other.close()
    # the two stale saves were refused quietly (app/api_errors.py): no failed resource logged
    assert [e for e in page.console_errors if "favicon" not in e] == []


def test_bench_failed_save_survives_a_reload(browser_page, live_server) -> None:
    page = browser_page
    world = seed(live_server, ["Check the bilge pump ."])
    sid = world["ids"][0]
    open_bench(page, live_server, sid)
    page.route("**/api/bench/*/revisions", lambda route: route.abort())
    retag_first_word(page, "VB")
    mine = shown_tree(page)
    page.wait_for_selector("#save-state[data-state='offline']")
    assert revisions(live_server, world["user_id"], sid) == []
    # the tab is closed (no chance to retry); a new tab of the same browser, the network
    # back: the change is restored and saved
    context = page.context
    page.close()
    fresh = context.new_page()
    fresh.goto(f"{live_server.base_url}/bench/{sid}")
    fresh.wait_for_selector("#bench[data-ready='1']")
    fresh.wait_for_selector("#save-state[data-state='saved']")
    assert shown_tree(fresh) == mine
    assert [r.tree for r in revisions(live_server, world["user_id"], sid)] == [mine]


def test_bench_text_panel_locates_errors_and_refuses_other_words(browser_page, live_server) -> None:
    page = browser_page
    world = seed(live_server, ["Check the bilge pump ."])
    open_bench(page, live_server, world["ids"][0])
    bad = "(ROOT\n  (S (VB Check) (NP (DT the) (NN bilge) (NN pump))\n  (. .)"
    page.fill("#tree-text", bad)
    page.click("[data-cmd='apply-text']")
    page.wait_for_selector("#text-error:not([hidden])")
    try:
        read_tree(bad)
    except BracketSyntaxError as err:  # the server's reader is the reference for the place
        where = f"Line {err.line}, column {err.column}:"
    assert page.inner_text("#text-error").startswith(where)
    page.fill("#tree-text", "(ROOT (S (VB Check) (NP (DT the) (NN bilge) (NN pumps)) (. .)))")
    page.click("[data-cmd='apply-text']")
    page.wait_for_function(
        "() => document.querySelector('#text-error').textContent.includes('word 4')"
    )
    assert "'pumps'" in page.inner_text("#text-error")
    assert "'pump'" in page.inner_text("#text-error")
    assert revisions(live_server, world["user_id"], world["ids"][0]) == []


def test_bench_unknown_label_is_confirmed_then_saved(browser_page, live_server) -> None:
    page = browser_page
    world = seed(live_server, ["Check the bilge pump ."])
    open_bench(page, live_server, world["ids"][0])
    click_phrase(page, shown_tree(page), "S", 0, 5)
    page.click("[data-cmd='relabel']")
    page.wait_for_selector("#prompt:not([hidden])")
    page.fill("#prompt-input", "ORDER")
    page.press("#prompt-input", "Enter")
    page.wait_for_function(
        "() => document.querySelector('#prompt-msg').textContent.includes('Enter again')"
    )
    page.press("#prompt-input", "Enter")
    page.wait_for_selector("#prompt", state="hidden")
    wait_saved(page)
    revs = revisions(live_server, world["user_id"], world["ids"][0])
    assert "(ORDER " in revs[-1].tree


def test_bench_unknown_label_is_refused_when_the_corpus_says_so(browser_page, live_server) -> None:
    page = browser_page
    world = seed(live_server, ["Check the bilge pump ."], policy="refuse")
    open_bench(page, live_server, world["ids"][0])
    click_phrase(page, shown_tree(page), "S", 0, 5)
    page.click("[data-cmd='relabel']")
    page.fill("#prompt-input", "ORDER")
    page.press("#prompt-input", "Enter")
    page.press("#prompt-input", "Enter")
    assert "not in this corpus's label set" in page.inner_text("#prompt-msg")
    assert page.is_visible("#prompt")
    page.press("#prompt-input", "Escape")
    page.wait_for_selector("#prompt", state="hidden")
    assert revisions(live_server, world["user_id"], world["ids"][0]) == []


def test_bench_hold_back_and_note(browser_page, live_server) -> None:
    page = browser_page
    world = seed(live_server, ["Check the bilge pump .", "Who signed off the ramp ?"])
    open_bench(page, live_server, world["ids"][0])
    page.fill("#note-text", "'bilge pump' is one word in this log")
    page.select_option("#hold-reason", "tokenization wrong")
    page.click("#hold-go")
    # the Bench offers to fix the tokens instead; holding back stays possible
    page.wait_for_selector("#confirm:not([hidden])")
    page.click("#confirm-no")
    page.wait_for_function(
        "() => document.querySelector('#hold-state').textContent.includes('tokenization wrong')"
    )
    with live_server.sessionmaker() as db:
        ann = db.scalar(select(Annotation).where(Annotation.sentence_id == world["ids"][0]))
        assert (ann.state, ann.flag) == ("flagged", "tokenization wrong")
        assert ann.comment == "'bilge pump' is one word in this log"
    page.goto(f"{live_server.base_url}/queue")
    assert "held back: tokenization wrong" in page.inner_text(".queue-table")
    # the next unfinished sentence skips the held-back one
    page.click("#continue")
    page.wait_for_url(f"**/bench/{world['ids'][1]}")


def test_bench_sixty_words_draw_without_overlap(browser_page, live_server, output_dir) -> None:
    text = (
        "On the morning of the third crossing the engineer from the harbour office noticed "
        "that the port engine , which had been serviced a week before by the crew of "
        "the second ferry , was running hotter than the starboard engine and that the "
        "oil pressure had dropped below the mark painted on the gauge during the spring "
        "inspection ."
    )
    assert len(text.split()) == 60
    page = browser_page
    world = seed(live_server, [text], grammar=True, labels=[], tags=[])
    open_bench(page, live_server, world["ids"][0])
    page.screenshot(path=str(output_dir / "bench-60-words.png"), full_page=True)
    boxes = page.eval_on_selector_all(
        "#tree-pane g.tw-node rect.tw-box",
        "els => els.map(e => { const b = e.getBBox(); return [b.x, b.y, b.width, b.height]; })",
    )
    assert len(boxes) > 60
    for i, (x1, y1, w1, h1) in enumerate(boxes):
        for x2, y2, w2, h2 in boxes[i + 1 :]:
            overlap = x1 < x2 + w2 and x2 < x1 + w1 and y1 < y2 + h2 and y2 < y1 + h1
            assert not overlap, ((x1, y1, w1, h1), (x2, y2, w2, h2))
    words = page.eval_on_selector_all(
        "#tree-pane g.tw-word text",
        "els => els.map(e => { const b = e.getBBox(); return [b.x, b.x + b.width]; })",
    )
    assert len(words) == 60
    assert all(words[i][1] < words[i + 1][0] for i in range(59))  # in order, apart
    # the pane scrolls sideways and zooming changes the drawn size
    assert page.evaluate(
        "() => { const p = document.querySelector('#tree-pane');"
        " return p.scrollWidth > p.clientWidth; }"
    )
    before = page.get_attribute("#tree-pane svg", "width")
    page.keyboard.press("-")
    assert int(page.get_attribute("#tree-pane svg", "width")) < int(before)
