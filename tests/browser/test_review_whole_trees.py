"""Review in Chromium with a long sentence: the submitted trees show whole (fit to the page's
width, never below a readable size, and one scroll box moves both), the bracket where they
differ is marked in the drawn trees, and the result is edited as a tree with the Bench's tree
model and drawing before it is settled. The words are invented (a ferry's log)."""

from __future__ import annotations

import pytest
from sqlalchemy import select

from app.models import Gold
from parser.trees import read_tree, write_tree
from tests.app.bench_helpers import assign, make_corpus
from tests.app.review_helpers import submit_tree
from tests.browser.conftest import login_as

WORDS = (
    "the mate checked the winch and the capstan while the deckhand coiled the ropes "
    "near the bow and the engineer drained the gearbox before the evening crossing "
    "to the island harbour beyond the old breakwater"
).split()


def _pairs(words: list[str]) -> list[str]:
    return [f"(NP (DT {a}) (NN {b}))" for a, b in zip(words[::2], words[1::2], strict=True)]


def _trees() -> tuple[str, str]:
    words = WORDS if len(WORDS) % 2 == 0 else WORDS[:-1]
    chunks = _pairs(words)
    a = "(ROOT (S " + " ".join(chunks) + "))"
    # B joins the last two pairs into one NP: a bracket A does not have, far to the right
    b = "(ROOT (S " + " ".join(chunks[:-2]) + " (NP " + " ".join(chunks[-2:]) + ")))"
    return a, b


@pytest.fixture
def long_review(live_server, db, people, login):  # type: ignore[no-untyped-def]
    a, b = _trees()
    text = " ".join(str(w) for w in read_tree(a).leaves())
    corpus, [s] = make_corpus(db, [text], labels=[], tags=[])
    assign(db, [s], people.ann1, people.ann2)
    submit_tree(login("ann1"), s.id, a)
    submit_tree(login("ann2"), s.id, b)
    return s, a, b


@pytest.mark.browser
def test_long_trees_show_whole_with_the_difference_marked(
    live_server, browser_page, long_review, output_dir
):
    s, a, b = long_review
    page = browser_page
    page.set_viewport_size({"width": 1440, "height": 900})
    login_as(page, live_server.base_url, "adj", next_path=f"/review/{s.id}")
    page.wait_for_selector("#tree-B svg.tw-tree")
    zoom = float(page.get_attribute("#rv", "data-zoom"))
    assert zoom >= 11 / 13 - 1e-3  # labels stay at least 11 px
    # both drawings sit in the same scroll box, and each is either whole on the page or that
    # box scrolls them together
    geometry = page.evaluate("""() => {
      const box = document.querySelector('.rv-trees');
      const svgs = [...document.querySelectorAll('.rv-tree svg.tw-tree')];
      const scroller = (e) => { while (e && e !== document.body) {
        const st = getComputedStyle(e); if (/(auto|scroll)/.test(st.overflowX)) return e;
        e = e.parentElement; } return null; };
      return {same: svgs.every(s => scroller(s) === box), boxWidth: box.clientWidth,
              scrollWidth: box.scrollWidth,
              widths: svgs.map(s => s.getBoundingClientRect().width)};
    }""")
    assert geometry["same"], geometry
    assert len(set(round(w) for w in geometry["widths"])) == 1  # one zoom: words line up
    if geometry["scrollWidth"] > geometry["boxWidth"]:
        assert zoom == pytest.approx(11 / 13, abs=1e-3)
        before = page.evaluate(
            "() => [...document.querySelectorAll('.rv-tree svg')]"
            ".map(s => s.getBoundingClientRect().left)"
        )
        page.evaluate("() => { document.querySelector('.rv-trees').scrollLeft = 300; }")
        after = page.evaluate(
            "() => [...document.querySelectorAll('.rv-tree svg')]"
            ".map(s => s.getBoundingClientRect().left)"
        )
        assert [x - y for x, y in zip(before, after, strict=True)] == [300, 300]
    else:
        assert max(geometry["widths"]) <= geometry["boxWidth"]
    # the NP only B has (over the last four words) is marked in B's drawing; A has nothing B
    # lacks (B keeps A's two NPs inside its own)
    assert page.locator("#tree-B .tw-node.rv-m-some").count() == 1
    assert page.locator("#tree-A .tw-node.rv-m-some, #tree-A .tw-node.rv-m-split").count() == 0
    mark = page.locator("#tree-B .tw-node.rv-m-some").first
    mark.scroll_into_view_if_needed()
    box = mark.bounding_box()
    assert box is not None and 0 <= box["x"] and box["x"] + box["width"] <= 1440
    page.screenshot(path=str(output_dir / "review-long.png"), full_page=True)
    assert [e for e in page.console_errors if "favicon" not in e] == []


@pytest.mark.browser
# its own server process: on a thread of the test process its checks missed the 15 s wait
# twice under load
@pytest.mark.server_process
def test_the_result_is_edited_as_a_tree_and_settled(live_server, browser_page, long_review, db):
    s, a, b = long_review
    page = browser_page
    login_as(page, live_server.base_url, "adj", next_path=f"/review/{s.id}")
    page.click("button[data-take='B']")
    page.wait_for_selector("#rv-check.rv-ok")
    # choose B's big last NP in the result's drawing and dissolve it: the result becomes A
    spans = [
        (lab, st, en) for lab, st, en in [(t.label(), *span) for t, span in _spans(read_tree(b))]
    ]
    big = next(i for i, (lab, st, en) in enumerate(spans) if en - st == 4)
    page.click(f"#rv-preview g.tw-phrase[data-index='{big}'] text")
    page.wait_for_selector(f"#rv-preview g.tw-phrase.tw-selected[data-index='{big}']")
    page.click("[data-edit='dissolve']")
    page.wait_for_function("() => !document.getElementById('rv-text').value.includes('(NP (NP')")
    page.wait_for_selector("#rv-check.rv-ok")
    assert write_tree(read_tree(page.input_value("#rv-text"))) == write_tree(read_tree(a))
    # a new bracket over the first four words (two NPs), labelled in the box; undo takes it back
    page.evaluate("() => { document.getElementById('rv-preview').scrollLeft = 0; }")
    first = page.locator("#rv-preview g.tw-word[data-index='0'] text").bounding_box()
    third = page.locator("#rv-preview g.tw-word[data-index='3'] text").bounding_box()
    page.mouse.move(first["x"] + first["width"] / 2, first["y"] + first["height"] / 2)
    page.mouse.down()
    page.mouse.move(third["x"] + third["width"] / 2, third["y"] + third["height"] / 2, steps=5)
    page.mouse.up()
    page.wait_for_selector("#rv-preview g.tw-word.tw-in-range[data-index='3']")
    page.fill("#rv-label", "FRAG")
    page.click("[data-edit='add']")
    page.wait_for_function("() => document.getElementById('rv-text').value.includes('(FRAG')")
    assert page.inner_text("#rv-edit-msg") == ""
    page.click("[data-edit='undo']")
    page.wait_for_function("() => !document.getElementById('rv-text').value.includes('(FRAG')")
    page.wait_for_selector("#rv-check.rv-ok")
    page.click("#rv-settle")
    page.wait_for_selector("#rv-state.state-gold")
    db.expire_all()
    gold = db.scalar(select(Gold).where(Gold.sentence_id == s.id, Gold.retired_at.is_(None)))
    assert gold is not None and gold.tree == write_tree(read_tree(a))
    assert [e for e in page.console_errors if "favicon" not in e] == []


def _spans(tree):  # type: ignore[no-untyped-def]
    """(node, (start, end)) in pre-order, phrases only: the page's phrase indices."""
    out = []

    def walk(node, start):  # type: ignore[no-untyped-def]
        if isinstance(node[0], str):
            return start + 1
        here = len(out)
        out.append(None)
        end = start
        for child in node:
            end = walk(child, end)
        out[here] = (node, (start, end))
        return end

    walk(tree, 0)
    return out
