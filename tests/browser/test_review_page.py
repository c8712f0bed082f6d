"""The Review page in Chromium: both submitted trees drawn, the combined view with its legend,
settling by mouse and by keyboard, reopening by keyboard; the database is read afterwards.

The sentences are invented (a ferry cooperative's log)."""

from __future__ import annotations

from sqlalchemy import select

from app.models import SENT_GOLD, SENT_IN_REVIEW, Annotation, Gold, Sentence
from parser.trees import read_tree, write_tree
from tests.app.bench_helpers import assign, make_corpus
from tests.app.review_helpers import LABELS, SENTENCE, TAGS, TREE_A, TREE_B, submit_tree
from tests.browser.conftest import login_as


def _two_disagreements(db, people, login):  # type: ignore[no-untyped-def]
    second = SENTENCE.replace("dawn", "noon")
    corpus, sentences = make_corpus(db, [SENTENCE, second], labels=LABELS, tags=TAGS)
    assign(db, sentences, people.ann1, people.ann2)
    a1, a2 = login("ann1"), login("ann2")
    for s, word in zip(sentences, ("dawn", "noon"), strict=True):
        submit_tree(a1, s.id, TREE_A.replace("dawn", word))
        submit_tree(a2, s.id, TREE_B.replace("dawn", word))
    return sentences


def _errors(page) -> list[str]:  # type: ignore[no-untyped-def]
    # the browser's own request for /favicon.ico is not the page's doing; a tree typed wrong on
    # purpose is refused quietly (app/api_errors.py), so it logs nothing
    return [e for e in page.console_errors if "favicon.ico" not in e]


def _annotation_of(db, sentence_id: int, user_id: int) -> int:  # type: ignore[no-untyped-def]
    return db.scalar(
        select(Annotation.id).where(
            Annotation.sentence_id == sentence_id, Annotation.user_id == user_id
        )
    )


def test_review_page_shows_trees_and_settles_by_mouse(
    live_server, browser_page, db, people, login, output_dir
):
    first, _ = _two_disagreements(db, people, login)
    page = browser_page
    login_as(page, live_server.base_url, "adj", next_path=f"/review/{first.id}")
    # both trees drawn by the Bench's tree view, with their annotators named
    page.wait_for_selector("#tree-A svg.tw-tree")
    page.wait_for_selector("#tree-B svg.tw-tree")
    assert page.inner_text("#tree-A .rv-who") == "Ann1"
    assert page.inner_text("#tree-B .rv-who") == "Ann2"
    assert page.get_attribute("#tree-A svg.tw-tree", "data-tree") == TREE_A
    # B's NP over "the quay at dawn" is B's alone: marked in B's drawing and on the ladder
    assert page.locator("#tree-B .tw-node.rv-m-some").count() == 1
    assert page.locator("#tree-A .tw-node.rv-m-split").count() == 1  # PP where B has ADVP
    assert page.locator(".rv-ladder .lad-span.lad-some").count() == 1
    assert page.locator(".rv-ladder .lad-span.lad-split").count() == 1
    assert page.locator(".rv-ladder .lad-span.lad-all").count() == 5
    assert page.locator(".rv-legend .rv-key").count() == 4
    page.screenshot(path=str(output_dir / "review.png"), full_page=True)

    page.click("button[data-take='A']")
    page.wait_for_selector("#rv-check.rv-ok")
    assert page.inner_text("#rv-source").startswith("tree A")
    page.wait_for_selector("#rv-preview svg.tw-tree")
    page.fill("#rv-note", "the PP hangs on the verb")
    page.wait_for_selector("#rv-settle:not([disabled])")
    page.click("#rv-settle")
    page.wait_for_selector("#rv-reopen")
    assert page.inner_text("#rv-state") == "gold"
    db.expire_all()
    [gold] = db.scalars(select(Gold).where(Gold.sentence_id == first.id)).all()
    assert gold.tree == write_tree(read_tree(TREE_A))
    assert gold.provenance == "adjudication" and gold.adjudicator_id == people.adjudicator.id
    assert gold.source_annotation_id == _annotation_of(db, first.id, people.ann1.id)
    assert gold.note == "the PP hangs on the verb"
    assert db.get(Sentence, first.id).state == SENT_GOLD
    assert _errors(page) == []


def test_settle_and_reopen_by_keyboard(live_server, browser_page, db, people, login):
    _, second = _two_disagreements(db, people, login)
    page = browser_page
    login_as(page, live_server.base_url, "adj", next_path=f"/review/{second.id}")
    page.wait_for_selector("#tree-B svg.tw-tree")
    page.keyboard.press("2")  # start from tree B
    page.wait_for_selector("#rv-check.rv-ok")
    assert page.inner_text("#rv-source").startswith("tree B")
    page.keyboard.press("Shift+S")
    page.wait_for_selector("#rv-reopen")
    db.expire_all()
    [gold] = db.scalars(select(Gold).where(Gold.sentence_id == second.id)).all()
    assert gold.tree == write_tree(read_tree(TREE_B.replace("dawn", "noon")))
    assert gold.source_annotation_id == _annotation_of(db, second.id, people.ann2.id)

    page.keyboard.press("Shift+R")  # reopen: the gold is retired, not lost
    page.wait_for_selector("#rv-settle")
    assert page.inner_text("#rv-state") == "in review"
    db.expire_all()
    assert db.get(Sentence, second.id).state == SENT_IN_REVIEW
    [old] = db.scalars(select(Gold).where(Gold.sentence_id == second.id)).all()
    assert old.retired_at is not None and old.retired_by_id == people.adjudicator.id

    # start from the retired gold (0), edit the text, settle with Ctrl+Enter in the text
    page.keyboard.press("0")
    page.wait_for_selector("#rv-check.rv-ok")
    page.keyboard.press("e")
    edited = TREE_A.replace("dawn", "noon")
    page.fill("#rv-text", "(ROOT (S (NP (DT the) (NN ferry))")
    page.wait_for_selector("#rv-check.rv-bad")
    assert "line 1, column" in page.inner_text("#rv-check")
    assert page.is_disabled("#rv-settle")
    page.fill("#rv-text", edited)
    page.wait_for_selector("#rv-check.rv-ok")
    page.focus("#rv-text")
    page.keyboard.press("Control+Enter")
    page.wait_for_selector("#rv-reopen")
    db.expire_all()
    golds = db.scalars(select(Gold).where(Gold.sentence_id == second.id).order_by(Gold.id)).all()
    assert len(golds) == 2 and golds[0].retired_at is not None and golds[1].retired_at is None
    assert golds[1].tree == write_tree(read_tree(edited))
    assert page.locator(".rv-history-list li").count() == 2
    assert _errors(page) == []
