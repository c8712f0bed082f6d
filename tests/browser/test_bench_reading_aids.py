"""Reading aids on the Bench: phrase-family tints and shapes (switchable off, the choice kept)
and the words the grammar never saw, marked. The grammar is trained on a slice of GUM
(Zeldes 2017, CC BY; ../shared/data/gum-trees)."""

from __future__ import annotations

from sqlalchemy import select

from app.models import User
from app.services.suggestions import grammar_from_bytes
from parser.trees import constituents, read_tree, strip_label
from tests.app.bench_helpers import assign, gum_grammar_bytes, install_grammar, make_corpus
from tests.browser.conftest import login_as
from tests.browser.test_bench_cycle import LABELS, TAGS, shown_tree

SENTENCE = "The mate greased the capstan with zorblefat before the crossing ."
FAMILY = {
    "NP": "noun",
    "VP": "verb",
    "S": "clause",
    "PP": "modifier",
    "SBAR": "clause",
    "ADVP": "modifier",
    "ADJP": "modifier",
    "ROOT": "other",
    "FRAG": "other",
}


def test_bench_families_and_unseen_words(browser_page, live_server, output_dir) -> None:
    grammar_bytes = gum_grammar_bytes()
    with live_server.sessionmaker() as db:
        corpus, sentences = make_corpus(db, [SENTENCE], labels=LABELS, tags=TAGS)
        ann1 = db.scalar(select(User).where(User.username == "ann1"))
        assign(db, sentences, ann1)
        install_grammar(db, corpus, grammar_bytes)
        sid = sentences[0].id
    page = browser_page
    login_as(page, live_server.base_url, "ann1", next_path=f"/bench/{sid}")
    page.wait_for_selector("#bench[data-ready='1']", timeout=60_000)

    # every phrase carries its family's class
    drawn = page.eval_on_selector_all(
        "#tree-pane g.tw-phrase",
        "els => els.map(e => [Number(e.dataset.index), e.getAttribute('class')])",
    )
    spans = constituents(read_tree(shown_tree(page)))
    families = set()
    for index, classes in drawn:
        label = strip_label(spans[index][0])
        if label in FAMILY:
            assert f"tw-fam-{FAMILY[label]}" in classes.split(), (label, classes)
            families.add(FAMILY[label])
    assert {"noun", "verb", "clause"} <= families

    def fill_and_corner(index: int) -> list[str]:
        return page.evaluate(
            """i => { const r = document.querySelector(
            `#tree-pane g.tw-phrase[data-index="${i}"] rect.tw-box`);
            const cs = getComputedStyle(r); return [cs.fill, cs.rx]; }""",
            index,
        )

    np_index = next(i for i, (lab, _a, _b) in enumerate(spans) if strip_label(lab) == "NP")
    vp_index = next(i for i, (lab, _a, _b) in enumerate(spans) if strip_label(lab) == "VP")
    on_np, on_vp = fill_and_corner(np_index), fill_and_corner(vp_index)
    assert on_np != on_vp  # two families look different (tint and corner)
    page.focus("#tree-pane")
    page.keyboard.press("f")  # off: every phrase plain white with the same corner
    off_np, off_vp = fill_and_corner(np_index), fill_and_corner(vp_index)
    assert off_np == off_vp == ["rgb(255, 255, 255)", "5px"]
    page.reload()  # the choice is kept in this browser
    page.wait_for_selector("#bench[data-ready='1']", timeout=60_000)
    assert page.get_attribute("[data-cmd='families']", "aria-pressed") == "false"
    page.click("[data-cmd='families']")  # and the legend's switch turns them back on
    assert fill_and_corner(np_index) == on_np
    page.screenshot(path=str(output_dir / "bench-families.png"), full_page=True)

    # the unseen words: exactly those outside the grammar's training vocabulary
    vocab = set(grammar_from_bytes(grammar_bytes).vocab)
    want = [i for i, w in enumerate(SENTENCE.split()) if w not in vocab]
    marked = page.eval_on_selector_all(
        "#tree-pane g.tw-word.tw-unseen", "els => els.map(e => Number(e.dataset.index))"
    )
    assert marked == want
    assert 6 in want and 0 not in want  # the invented word is unseen, "The" is not
