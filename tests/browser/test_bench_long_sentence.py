"""A 60-word GUM sentence (Zeldes 2017, CC BY; ../shared/data/gum-trees) on the Bench at
1440x900: no horizontal page scroll; walking the tree node by node, every label and every word
comes into the tree pane's view at a legible size (11 px or more); the overview frames the
visible part and a click there scrolls; fit-to-width, fold and unfold; the chosen node stays in
view through an edit, and the saved tree is the intended one."""

from __future__ import annotations

import pytest
from sqlalchemy import select

from app.models import User
from parser.trees import constituents, read_tree, read_trees, strip_function_tags, words, write_tree
from tests.app.bench_helpers import assign, make_corpus
from tests.browser.conftest import login_as
from tests.browser.test_bench_cycle import answer_prompt, shown_tree, stored, wait_saved, wait_tree
from tests.shared_data import gum_files

LEGIBLE_PX = 11


def _sixty_word_tree():
    for path in gum_files():
        for tree in read_trees(path.read_text("utf-8")):
            if len(words(tree)) == 60:
                return strip_function_tags(tree)
    pytest.fail("no 60-word sentence in the GUM trees")


def _in_view(page, selector: str) -> dict:
    """Where the element is against the tree pane's visible box, and its font's drawn size."""
    return page.evaluate(
        """sel => {
        const pane = document.querySelector('#tree-pane').getBoundingClientRect();
        const el = document.querySelector(sel);
        if (!el) return {found: false};
        const r = el.getBoundingClientRect();
        const svg = document.querySelector('#tree-pane svg');
        const scale = svg.getBoundingClientRect().width / svg.viewBox.baseVal.width;
        const px = parseFloat(getComputedStyle(el).fontSize) * scale;
        return {found: true, px, inside: r.left >= pane.left - 0.5 && r.right <= pane.right + 0.5
                && r.top >= pane.top - 0.5 && r.bottom <= pane.bottom + 0.5};
    }""",
        selector,
    )


@pytest.mark.slow
def test_bench_sixty_word_gum_sentence_is_workable(browser_page, live_server, output_dir) -> None:
    tree = _sixty_word_tree()
    text = write_tree(tree)
    tokens = words(tree)
    with live_server.sessionmaker() as db:
        _corpus, sentences = make_corpus(db, [" ".join(tokens)], labels=[], tags=[])
        ann1 = db.scalar(select(User).where(User.username == "ann1"))
        assign(db, sentences, ann1)
        sid, uid = sentences[0].id, ann1.id
    page = browser_page
    page.set_viewport_size({"width": 1440, "height": 900})
    login_as(page, live_server.base_url, "ann1", next_path=f"/bench/{sid}")
    page.wait_for_selector("#bench[data-ready='1']", timeout=60_000)
    page.fill("#tree-text", text)
    page.click("[data-cmd='apply-text']")
    wait_tree(page, text)
    wait_saved(page)
    page.evaluate("() => window.scrollTo(0, 0)")
    page.keyboard.press("0")  # full size (a deep tree may open zoomed out)
    assert page.evaluate("() => document.documentElement.scrollWidth <= window.innerWidth")

    # the overview shows the whole tree and frames the part on screen
    assert page.is_visible("#overview")
    assert page.evaluate("""() => { const p = document.querySelector('#tree-pane');
        const f = document.querySelector('#overview rect.tw-viewport');
        return Math.abs(Number(f.getAttribute('width')) - p.clientWidth) < 1 &&
               Number(f.getAttribute('x')) === p.scrollLeft; }""")

    # walk every node (j: phrases and tags in reading order): each one, and each word, comes
    # into view at a legible size without the page scrolling sideways
    spans = constituents(read_tree(text))
    page.focus("#tree-pane")
    page.keyboard.press("Home")
    seen_phrases, seen_words = set(), set()
    for _ in range(len(spans) + len(tokens)):
        sel = page.eval_on_selector(
            "#tree-pane g.tw-selected", "e => [e.dataset.kind, Number(e.dataset.index)]"
        )
        kind, index = sel
        label = _in_view(page, "#tree-pane g.tw-selected text.tw-label")
        assert label["inside"] and label["px"] >= LEGIBLE_PX, (kind, index, label)
        if kind == "tag":
            word = _in_view(page, f"#tree-pane g.tw-word[data-index='{index}'] text")
            assert word["inside"] and word["px"] >= LEGIBLE_PX, (index, word)
            seen_words.add(index)
        else:
            seen_phrases.add(index)
        page.keyboard.press("j")
    assert seen_words == set(range(60)) and seen_phrases == set(range(len(spans)))
    assert page.evaluate("() => document.documentElement.scrollWidth <= window.innerWidth")

    # a click at the overview's right end scrolls the pane there
    box = page.locator("#overview svg").bounding_box()
    page.evaluate("() => { document.querySelector('#tree-pane').scrollLeft = 0; }")
    page.mouse.click(box["x"] + box["width"] - 3, box["y"] + box["height"] / 2)
    assert page.evaluate(
        "() => { const p = document.querySelector('#tree-pane');"
        " return p.scrollLeft + p.clientWidth >= p.scrollWidth - 2; }"
    )

    # fit to width keeps every label and word legible: 60 words do not fit at 11 px, so the
    # fit shows as much as stays legible, the rest scrolls in the pane (not the page) and the
    # overview stays; the status line says so. Then back to full size.
    page.keyboard.press("w")
    fit = page.evaluate(
        """() => { const svg = document.querySelector('#tree-pane svg.tw-tree');
        const scale = svg.getBoundingClientRect().width / svg.viewBox.baseVal.width;
        const px = [...svg.querySelectorAll('text.tw-label, text.tw-word-text')]
          .map(e => parseFloat(getComputedStyle(e).fontSize) * scale);
        const p = document.querySelector('#tree-pane');
        return {smallest: Math.min(...px), scrolls: p.scrollWidth > p.clientWidth,
                zoom: document.querySelector('#zoom-level').textContent}; }"""
    )
    assert fit["smallest"] >= LEGIBLE_PX, fit
    assert fit["scrolls"] and fit["zoom"] != "100%", fit
    assert page.is_visible("#overview")
    assert "labels stay legible" in page.text_content("#bench-message")
    assert page.evaluate("() => document.documentElement.scrollWidth <= window.innerWidth")
    page.keyboard.press("0")

    # fold the widest phrase below the root: its words go into one line, the tree is unchanged
    widest = max(
        range(1, len(spans)),
        key=lambda k: (spans[k][2] - spans[k][1] < 60, spans[k][2] - spans[k][1], -k),
    )
    first, last = spans[widest][1], spans[widest][2] - 1
    page.click(f"#tree-pane g.tw-phrase[data-index='{widest}']")
    page.keyboard.press("z")
    page.wait_for_selector("#tree-pane g.tw-collapsed")
    assert page.locator(f"#tree-pane g.tw-word[data-index='{first}']").count() == 0
    assert page.text_content("#tree-pane text.tw-summary") == (
        f"{tokens[first]} … {tokens[last]} ({last - first + 1} words)"
    )
    assert shown_tree(page) == text
    page.screenshot(path=str(output_dir / "bench-60-folded.png"))
    page.keyboard.press("z")
    page.wait_for_selector("#tree-pane g.tw-collapsed", state="detached")
    assert page.locator("#tree-pane g.tw-word").count() == 60

    # the chosen node stays in view through an edit: relabel the last phrase on the right
    last_phrase = max(range(1, len(spans)), key=lambda k: (spans[k][1], k))
    page.evaluate("() => { document.querySelector('#tree-pane').scrollLeft = 0; }")
    label, a, b = spans[last_phrase]
    page.evaluate(
        "i => document.querySelector(`#tree-pane g.tw-phrase[data-index='${i}']`)"
        ".dispatchEvent(new MouseEvent('click', {bubbles: true}))",
        last_phrase,
    )
    assert _in_view(page, "#tree-pane g.tw-selected text.tw-label")["inside"]
    page.keyboard.press("r")
    answer_prompt(page, "FRAG")
    relabelled = constituents(read_tree(shown_tree(page)))
    assert relabelled[last_phrase] == ("FRAG", a, b)
    assert _in_view(page, "#tree-pane g.tw-selected text.tw-label")["inside"]
    wait_saved(page)
    _ann, revs = stored(live_server, uid, sid)
    saved = constituents(read_tree(revs[-1].tree))
    assert saved == [*spans[:last_phrase], ("FRAG", a, b), *spans[last_phrase + 1 :]]
