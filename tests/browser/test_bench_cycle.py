"""The Bench in real Chromium: the whole edit cycle by mouse and by keyboard only, then the
database holds exactly the tree the page showed. The grammar is trained on a slice of GUM
(Zeldes 2017, CC BY; ../shared/data/gum-trees)."""

from __future__ import annotations

from typing import Any

import pytest
from sqlalchemy import select

from app.models import Annotation, Revision, User
from app.services.corpora import PTB_LABELS, PTB_TAGS
from parser.trees import constituents, pos_tags, read_tree, words, write_tree
from tests.app.bench_helpers import assign, gum_grammar_bytes, install_grammar, make_corpus
from tests.app.conftest import PASSWORD
from tests.app.live_server import Client
from tests.browser.conftest import login_as

SENTENCE = "The port engine was stopped for an oil change ."
START = (
    "(ROOT (S (NP (DT The) (NN port) (NN engine)) (VP (VBD was) (VP (VBN stopped) "
    "(PP (IN for) (NP (DT an) (NN oil) (NN change))))) (. .)))"
)
AFTER_ADD = START.replace("(NN oil) (NN change)", "(NML (NN oil) (NN change))")
AFTER_RELABEL = AFTER_ADD.replace("(S (NP (DT The)", "(S (NP-SBJ (DT The)")
AFTER_DISSOLVE = (
    "(ROOT (S (NP-SBJ (DT The) (NN port) (NN engine)) (VP (VBD was) (VBN stopped) "
    "(PP (IN for) (NP (DT an) (NML (NN oil) (NN change))))) (. .)))"
)
PINNED = ("PP", 5, 9)

LABELS = [*PTB_LABELS, "NP-SBJ", "NP-TMP", "PP-TMP"]
# GUM's tags beyond the Penn set (the grammar may propose them)
TAGS = [*PTB_TAGS, "ADD", "AFX", "GW", "XX", "-LSB-", "-RSB-"]


@pytest.fixture
def ferry(live_server) -> dict[str, Any]:
    with live_server.sessionmaker() as db:
        corpus, sentences = make_corpus(
            db, [SENTENCE, "Check the bilge pump ."], labels=LABELS, tags=TAGS
        )
        ann1 = db.scalar(select(User).where(User.username == "ann1"))
        assign(db, sentences, ann1)
        install_grammar(db, corpus, gum_grammar_bytes())
        return {"sentence_id": sentences[0].id, "next_id": sentences[1].id, "user_id": ann1.id}


def _open(page, live_server, ferry) -> None:
    login_as(page, live_server.base_url, "ann1", next_path=f"/bench/{ferry['sentence_id']}")
    # generous: the first parse on a busy machine (the benchmark measures the speed)
    page.wait_for_selector("#bench[data-ready='1']", timeout=60_000)


def shown_tree(page) -> str:
    """The one-line text of the tree the page has drawn."""
    return page.get_attribute("#tree-pane svg.tw-tree", "data-tree")


def wait_tree(page, text: str) -> None:
    page.wait_for_function(
        "t => document.querySelector('#tree-pane svg.tw-tree').dataset.tree === t", arg=text
    )


def wait_saved(page) -> None:
    page.wait_for_selector("#save-state[data-state='saved']")


def phrase_index(tree_text: str, label: str, start: int, end: int) -> int:
    """The node's id on the page: its place in pre-order (parser.trees.constituents order)."""
    return constituents(read_tree(tree_text)).index((label, start, end))


def click_phrase(page, tree_text: str, label: str, start: int, end: int) -> None:
    idx = phrase_index(tree_text, label, start, end)
    page.click(f"#tree-pane g.tw-phrase[data-index='{idx}']")
    page.wait_for_selector(f"#tree-pane g.tw-phrase.tw-selected[data-index='{idx}']")


def drag_words(page, first: int, last: int) -> None:
    page.locator(f"#tree-pane g.tw-word[data-index='{first}'] text").scroll_into_view_if_needed()
    a = page.locator(f"#tree-pane g.tw-word[data-index='{first}'] text").bounding_box()
    b = page.locator(f"#tree-pane g.tw-word[data-index='{last}'] text").bounding_box()
    page.mouse.move(a["x"] + a["width"] / 2, a["y"] + a["height"] / 2)
    page.mouse.down()
    page.mouse.move(b["x"] + b["width"] / 2, b["y"] + b["height"] / 2, steps=5)
    page.mouse.up()


def answer_prompt(page, label: str) -> None:
    page.wait_for_selector("#prompt:not([hidden])")
    page.fill("#prompt-input", label)
    page.press("#prompt-input", "Enter")
    page.wait_for_selector("#prompt", state="hidden")


def stored(live_server, user_id: int, sentence_id: int) -> tuple[Annotation, list[Revision]]:
    with live_server.sessionmaker() as db:
        ann = db.scalar(
            select(Annotation).where(
                Annotation.user_id == user_id, Annotation.sentence_id == sentence_id
            )
        )
        revs = db.scalars(
            select(Revision).where(Revision.annotation_id == ann.id).order_by(Revision.number)
        ).all()
        return ann, list(revs)


def _full_suggestion(page, sentence_id: int) -> dict:
    """The complete suggestion, fetched by the page's own session."""
    return page.evaluate(
        "async id => (await fetch(`/api/bench/${id}/suggestion`)).json()", sentence_id
    )


def check_reading_differences(page, current: str) -> None:
    """Each reading tells how many brackets and tags differ from the tree on screen."""
    data = page.evaluate("() => JSON.parse(document.getElementById('bench-data').textContent)")
    data["suggestion"] = _full_suggestion(page, data["sentence"]["id"])
    texts = page.eval_on_selector_all(
        "#readings button.reading", "els => els.map(e => e.textContent)"
    )
    mine = read_tree(current)
    trees = [alt["tree"] for alt in data["suggestion"]["alternatives"]]
    if data["suggestion"]["consensus"]:
        assert texts[0].startswith("Consensus")
        trees.insert(0, data["suggestion"]["consensus"])
    for tree, text in zip(trees, texts, strict=True):
        theirs = read_tree(tree)
        d = len(set(constituents(theirs)) ^ set(constituents(mine))) + sum(
            x != y for x, y in zip(pos_tags(theirs), pos_tags(mine), strict=True)
        )
        want = "same as yours" if d == 0 else f"{d} difference"
        assert want in text, (text, d)


def check_doubt_marks(page, live_server, ferry) -> None:
    """The constituent the annotator just added is theirs: no doubt mark, even though the
    grammar doubts it (every other node's mark is checked in test_bench_loop.py)."""
    page.wait_for_selector("#bench[data-doubts='1']", timeout=60_000)
    other = Client(live_server.base_url, "ann1", PASSWORD)
    full = other.http.get(f"/api/bench/{ferry['sentence_id']}/suggestion").json()
    other.close()
    post = {(lab, a, b): p for lab, a, b, p in full["posteriors"]}
    assert post.get(("NML", 7, 9), 0.0) < 0.2  # the grammar doubts it
    index = phrase_index(AFTER_ADD, "NML", 7, 9)
    node = page.locator(f"#tree-pane g.tw-phrase[data-index='{index}']")
    assert "tw-yours" in (node.get_attribute("class") or "")
    assert node.locator("circle.tw-dot").count() == 0


def _check_stored(page, live_server, ferry, expected: str) -> None:
    ann, revs = stored(live_server, ferry["user_id"], ferry["sentence_id"])
    assert ann.state == "submitted"
    assert ann.head == revs[-1].number == len(revs)
    assert read_tree(revs[-1].tree) == read_tree(shown_tree(page)) == read_tree(expected)
    pins = revs[-1].pins
    assert (pins["spans"], pins["tags"]) == ([list(PINNED[1:]) + [PINNED[0]]], [])


def test_bench_mouse_cycle(browser_page, live_server, ferry, output_dir) -> None:
    page = browser_page
    _open(page, live_server, ferry)
    assert page.get_attribute("#save-state", "data-state") == "fresh"
    assert page.locator("#readings button.reading:not(.consensus)").count() == 5
    page.wait_for_selector("#bench[data-doubts='1']", timeout=60_000)
    # with the posteriors in, the consensus heads the readings; a click starts from it
    page.wait_for_selector("#readings button.consensus")
    page.click("#readings button.consensus")
    wait_tree(page, _full_suggestion(page, ferry["sentence_id"])["consensus"])
    wait_saved(page)  # choosing a reading saves it; the next edit must not race that save
    page.click(f"#tree-pane g.tw-phrase[data-index='{1}']")  # something chosen, for the picture
    page.screenshot(path=str(output_dir / "bench-start.png"), full_page=True)

    # a known start: the bracketed-text panel, applied by mouse
    page.fill("#tree-text", START)
    page.click("[data-cmd='apply-text']")
    wait_tree(page, START)
    wait_saved(page)

    # add a constituent over a dragged span
    drag_words(page, 7, 8)
    page.wait_for_selector("#tree-pane g.tw-word.tw-in-range[data-index='8']")
    page.click("[data-cmd='add']")
    answer_prompt(page, "NML")
    wait_tree(page, AFTER_ADD)

    check_doubt_marks(page, live_server, ferry)

    # relabel one
    click_phrase(page, AFTER_ADD, "NP", 0, 3)
    page.click("[data-cmd='relabel']")
    answer_prompt(page, "NP-SBJ")
    wait_tree(page, AFTER_RELABEL)

    # delete one: its children move up
    click_phrase(page, AFTER_RELABEL, "VP", 4, 9)
    page.click("[data-cmd='dissolve']")
    wait_tree(page, AFTER_DISSOLVE)
    check_reading_differences(page, AFTER_DISSOLVE)

    # pin one and re-parse: the pinned span survives
    click_phrase(page, AFTER_DISSOLVE, *PINNED)
    page.click("[data-cmd='pin']")
    page.wait_for_selector("#tree-pane g.tw-phrase.tw-pinned")
    wait_saved(page)
    page.screenshot(path=str(output_dir / "bench.png"), full_page=True)  # pins and doubts
    page.click("[data-cmd='regrow']")
    page.wait_for_function(
        "t => document.querySelector('#tree-pane svg.tw-tree').dataset.tree !== t",
        arg=AFTER_DISSOLVE,
    )
    regrown = read_tree(shown_tree(page))
    assert words(regrown) == SENTENCE.split()
    assert PINNED in constituents(regrown)
    pinned_idx = constituents(regrown).index(PINNED)
    assert "tw-pinned" in page.get_attribute(
        f"#tree-pane g.tw-phrase[data-index='{pinned_idx}']", "class"
    )
    wait_saved(page)
    _, revs = stored(live_server, ferry["user_id"], ferry["sentence_id"])
    assert revs[-1].source == "reparse" and read_tree(revs[-1].tree) == regrown

    # undo the re-parse
    page.click("[data-cmd='undo']")
    wait_tree(page, AFTER_DISSOLVE)
    wait_saved(page)

    # hand in
    page.click("[data-cmd='handin']")
    page.wait_for_selector("#confirm:not([hidden])")
    page.click("#confirm-yes")
    page.wait_for_selector("#save-state[data-state='readonly']")
    assert page.locator("[data-cmd='add']").is_disabled()
    _check_stored(page, live_server, ferry, AFTER_DISSOLVE)
    _, revs = stored(live_server, ferry["user_id"], ferry["sentence_id"])
    # the test waited for each save, so each kind of change left its own revision
    assert [r.source for r in revs][:2] == ["alternative", "text"]  # the consensus, then text
    assert {"edit", "reparse"} <= {r.source for r in revs}
    assert [e for e in page.console_errors if "favicon" not in e] == []


def _presses_to(tree_text: str, kind: str, key: Any) -> int:
    """How many `j` presses from the root reach a node (phrases and tags in pre-order)."""
    tree = read_tree(tree_text)
    order: list[tuple[str, Any]] = []
    word = 0

    def walk(node, start: int) -> int:
        nonlocal word
        if isinstance(node[0], str):
            order.append(("tag", word))
            word += 1
            return start + 1
        slot = len(order)
        order.append(("phrase", None))
        end = start
        for child in node:
            end = walk(child, end)
        order[slot] = ("phrase", (node.label(), start, end))
        return end

    walk(tree, 0)
    return order.index((kind, key))


def go_to(page, tree_text: str, kind: str, key: Any) -> None:
    page.keyboard.press("Home")
    for _ in range(_presses_to(tree_text, kind, key)):
        page.keyboard.press("j")


def test_bench_keyboard_only_cycle(browser_page, live_server, ferry) -> None:
    page = browser_page
    _open(page, live_server, ferry)
    kb = page.keyboard

    kb.press("e")  # the bracketed text
    kb.press("Control+a")
    kb.insert_text(START)
    kb.press("Control+Enter")
    wait_tree(page, START)

    go_to(page, START, "tag", 7)
    kb.press("Shift+ArrowRight")
    page.wait_for_selector("#tree-pane g.tw-word.tw-in-range[data-index='8']")
    kb.press("a")
    page.wait_for_selector("#prompt:not([hidden])")
    kb.type("NML")
    kb.press("Enter")
    wait_tree(page, AFTER_ADD)

    go_to(page, AFTER_ADD, "phrase", ("NP", 0, 3))
    kb.press("r")
    page.wait_for_selector("#prompt:not([hidden])")
    kb.press("Control+a")
    kb.type("NP-SBJ")
    kb.press("Enter")
    wait_tree(page, AFTER_RELABEL)

    go_to(page, AFTER_RELABEL, "phrase", ("VP", 4, 9))
    kb.press("x")
    wait_tree(page, AFTER_DISSOLVE)

    go_to(page, AFTER_DISSOLVE, "phrase", PINNED)
    kb.press("p")
    page.wait_for_selector("#tree-pane g.tw-phrase.tw-pinned")
    kb.press("g")
    page.wait_for_function(
        "t => document.querySelector('#tree-pane svg.tw-tree').dataset.tree !== t"
        " || !document.getElementById('regrow-offer').hidden",
        arg=AFTER_DISSOLVE,
        timeout=60_000,
    )
    if shown_tree(page) == AFTER_DISSOLVE:  # offered (implausible): g takes it
        kb.press("g")
        page.wait_for_function(
            "t => document.querySelector('#tree-pane svg.tw-tree').dataset.tree !== t",
            arg=AFTER_DISSOLVE,
        )
    assert PINNED in constituents(read_tree(shown_tree(page)))

    kb.press("u")
    wait_tree(page, AFTER_DISSOLVE)
    kb.press("U")  # redo, then undo again: both directions work from the keyboard
    page.wait_for_function(
        "t => document.querySelector('#tree-pane svg.tw-tree').dataset.tree !== t",
        arg=AFTER_DISSOLVE,
    )
    kb.press("Control+z")
    wait_tree(page, AFTER_DISSOLVE)

    kb.press("Control+Enter")
    page.wait_for_selector("#confirm:not([hidden])")
    kb.press("Enter")  # the focused "Hand in" button
    page.wait_for_selector("#save-state[data-state='readonly']")
    _check_stored(page, live_server, ferry, AFTER_DISSOLVE)

    kb.press("n")  # next unfinished sentence
    page.wait_for_url(f"**/bench/{ferry['next_id']}")
    page.wait_for_selector("#bench[data-ready='1']")
    assert page.inner_text("#sentence-text") == "Check the bilge pump ."
    assert [e for e in page.console_errors if "favicon" not in e] == []


def test_bench_help_overlay_lists_the_keys(browser_page, live_server, ferry) -> None:
    page = browser_page
    _open(page, live_server, ferry)
    page.keyboard.press("?")
    page.wait_for_selector("#help:not([hidden])")
    text = page.inner_text("#help")
    for needle in (
        "add a bracket",
        "dissolve",
        "pin / unpin",
        "regrow",
        "undo",
        "redo",
        "hand in",
        "next unfinished",
    ):
        assert needle in text
    page.keyboard.press("Escape")
    page.wait_for_selector("#help", state="hidden")


def test_bench_cycle_expected_trees_are_consistent() -> None:
    """The expected trees above are well-formed, keep the sentence's words and differ step by
    step (guards the cycle tests' own data)."""
    steps = [START, AFTER_ADD, AFTER_RELABEL, AFTER_DISSOLVE]
    assert len({write_tree(read_tree(t)) for t in steps}) == 4
    assert all(words(read_tree(t)) == SENTENCE.split() for t in steps)
