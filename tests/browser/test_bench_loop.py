"""The parser in the loop, in real Chromium against the database: two annotators start from the
same tree whatever happens between their openings; a re-parse keeps everything the annotator
said and says what it did; doubt marks leave the annotator's own work alone and mark tags too.
Grammars trained on slices of GUM (Zeldes 2017, CC BY; ../shared/data/gum-trees)."""

from __future__ import annotations

from collections import Counter

import pytest
from sqlalchemy import select

from app.models import Corpus, GrammarVersion, Sentence, User
from app.services.suggestions import grammar_for
from parser.chart import parse
from parser.trees import constituents, pos_tags, read_tree, strip_label, words, write_tree
from tests.app.bench_helpers import (
    FERRY_SENTENCES,
    assign,
    gum_grammar_bytes,
    heldout_gum_trees,
    install_grammar,
    make_corpus,
)
from tests.browser.conftest import login_as
from tests.browser.test_bench_cycle import (
    LABELS,
    START,
    TAGS,
    answer_prompt,
    click_phrase,
    ferry,  # noqa: F401  (fixture)
    shown_tree,
    stored,
    wait_saved,
    wait_tree,
)


def _open(page, base_url: str, user: str, sentence_id: int) -> str:
    login_as(page, base_url, user, next_path=f"/bench/{sentence_id}")
    page.wait_for_selector("#bench[data-ready='1']", timeout=60_000)
    return shown_tree(page)


@pytest.mark.slow
@pytest.mark.parametrize("first_user", ["ann1", "ann2"])
def test_bench_two_annotators_start_equal_across_a_retraining(
    browser, live_server, first_user
) -> None:
    with live_server.sessionmaker() as db:
        texts = [" ".join(words(t)) for t in heldout_gum_trees(12, min_words=12, max_words=25)]
        corpus, sentences = make_corpus(db, texts, labels=[], tags=[])
        users = {u: db.scalar(select(User).where(User.username == u)) for u in ("ann1", "ann2")}
        assign(db, sentences, *users.values())
        v1 = install_grammar(db, corpus, gum_grammar_bytes())
        v2 = GrammarVersion(
            corpus_id=corpus.id,
            number=2,
            status=v1.status,
            data=gum_grammar_bytes(20),
            training_size=0,
        )
        db.add(v2)
        db.commit()
        g1, g2 = grammar_for(db, v1.id), grammar_for(db, v2.id)
        # a sentence the two grammars bracket differently, so a start from the wrong one shows
        target = next(
            s
            for s in sentences
            if write_tree(parse(g1, s.tokens, posteriors=True).consensus)
            != write_tree(parse(g2, s.tokens, posteriors=True).consensus)
        )
        sid, v1_id, v2_id, corpus_id = target.id, v1.id, v2.id, corpus.id
        second_user = "ann2" if first_user == "ann1" else "ann1"
        first_id, second_id = users[first_user].id, users[second_user].id
    pages = [
        browser.new_context(viewport={"width": 1400, "height": 900}).new_page() for _ in range(2)
    ]
    try:
        first_tree = _open(pages[0], live_server.base_url, first_user, sid)
        with live_server.sessionmaker() as db:  # a retraining made version 2 active
            db.get(Corpus, corpus_id).active_grammar_id = v2_id
            db.commit()
        second_tree = _open(pages[1], live_server.base_url, second_user, sid)
        assert read_tree(second_tree) == read_tree(first_tree)
        # each saves a change (a pin on the first constituent under the root)
        for page, user_id in ((pages[1], second_id), (pages[0], first_id)):
            page.click("#tree-pane g.tw-phrase[data-index='1']")
            page.keyboard.press("p")
            wait_saved(page)
            ann, revs = stored(live_server, user_id, sid)
            assert (ann.start_kind, ann.start_grammar_version_id) == ("consensus", v1_id)
            assert ann.start_suggestion_id is not None
            assert revs[-1].pins["spans"]
    finally:
        for page in pages:
            page.context.close()


def _say(page) -> str:
    return page.text_content("#bench-message") or ""


def test_bench_pin_relabel_regrow_keeps_everything_said(browser_page, live_server, ferry) -> None:  # noqa: F811
    page = browser_page
    _open(page, live_server.base_url, "ann1", ferry["sentence_id"])
    page.fill("#tree-text", START)
    page.click("[data-cmd='apply-text']")
    wait_tree(page, START)
    wait_saved(page)
    # relabel the PP over "for an oil change" to ADVP (a label the grammar does not build
    # there) and pin it
    click_phrase(page, START, "PP", 5, 9)
    page.keyboard.press("r")
    answer_prompt(page, "ADVP")
    relabelled = START.replace("(PP (IN for)", "(ADVP (IN for)")
    wait_tree(page, relabelled)
    page.keyboard.press("p")
    # correct the tag of "oil" (word 8) by mouse, and pin the tag of "The"
    page.click("#tree-pane g.tw-tag[data-index='7']")
    page.keyboard.press("r")
    answer_prompt(page, "JJ")
    page.click("#tree-pane g.tw-tag[data-index='0']")
    page.keyboard.press("p")
    wait_saved(page)
    before = shown_tree(page)
    page.keyboard.press("g")
    page.wait_for_function(
        "() => /Re-parsed/.test("
        "document.getElementById('bench-message').textContent) || "
        "!document.getElementById('regrow-offer').hidden",
        timeout=60_000,
    )
    if page.is_visible("#regrow-offer"):  # offered: it says what it would do; g takes it
        assert "Re-parsed with grammar version 1 around" in page.text_content("#regrow-offer")
        page.keyboard.press("g")
        page.wait_for_function(
            "() => /Taken/.test(document.getElementById('bench-message').textContent)"
        )
    message = _say(page)
    # the page says what the re-parse did: around what, and what changed (or nothing)
    assert message.startswith("Re-parsed with grammar version 1 around 1 bracket, "), message
    assert "Taken" in message or "nothing would change" in message, message
    wait_saved(page)
    tree = read_tree(shown_tree(page))
    spans = set(constituents(tree))
    assert ("ADVP", 5, 9) in spans  # the pinned, relabelled span
    assert pos_tags(tree)[7] == "JJ" and pos_tags(tree)[0] == "DT"
    ann, revs = stored(live_server, ferry["user_id"], ferry["sentence_id"])
    assert read_tree(revs[-1].tree) == tree
    assert [5, 9, "ADVP"] in revs[-1].pins["spans"] and [0, "DT"] in revs[-1].pins["tags"]
    assert [7, "JJ"] in revs[-1].pins.get("edited_tags", [])
    if "nothing would change" not in message:
        assert revs[-1].source == "reparse" and shown_tree(page) != before


def _expected_dots(p: float | None) -> int:
    # the Bench's legend: one dot under 50%, two under 20%
    return 0 if p is None or p >= 0.5 else 1 if p >= 0.2 else 2


def test_bench_doubt_marks_leave_the_annotators_own_work(browser_page, live_server) -> None:
    page = browser_page
    with live_server.sessionmaker() as db:
        # "bilge" and "pump" get unsure tags from this grammar (measured: 0.47 and 0.35)
        corpus, sentences = make_corpus(db, [FERRY_SENTENCES[1]], labels=LABELS, tags=TAGS)
        ann1 = db.scalar(select(User).where(User.username == "ann1"))
        assign(db, sentences, ann1)
        install_grammar(db, corpus, gum_grammar_bytes())
        ferry = {"sentence_id": sentences[0].id, "user_id": ann1.id}
    start = _open(page, live_server.base_url, "ann1", ferry["sentence_id"])
    # relabel a multi-word NP to ADJP: the grammar gives that almost nothing, but it is the
    # annotator's now, so it carries no doubt mark
    target = next(
        (lab, a, b)
        for lab, a, b in constituents(read_tree(start))
        if strip_label(lab) == "NP" and b - a > 1
    )
    click_phrase(page, start, *target)
    page.keyboard.press("r")
    answer_prompt(page, "ADJP")
    page.wait_for_function(
        "t => document.querySelector('#tree-pane svg.tw-tree').dataset.tree !== t", arg=start
    )
    mine = shown_tree(page)
    wait_saved(page)
    page.wait_for_timeout(1500)  # the grammar is asked again after the edit
    _, revs = stored(live_server, ferry["user_id"], ferry["sentence_id"])
    pins = revs[-1].pins
    assert [target[1], target[2], "ADJP"] in pins["edited_spans"]
    body = page.evaluate(
        """async ([id, pins, tree]) => {
          const csrf = document.querySelector('meta[name="csrf-token"]').content;
          const r = await fetch(`/api/bench/${id}/reparse`, {method: "POST",
            headers: {"Content-Type": "application/json", "X-CSRF-Token": csrf},
            body: JSON.stringify({pins, tree, k: 3})});
          return r.json();
        }""",
        [ferry["sentence_id"], pins, mine],
    )
    post = {(lab, a, b): p for lab, a, b, p in body["posteriors"]}
    spans = constituents(read_tree(mine))
    drawn = page.eval_on_selector_all(
        "#tree-pane g.tw-node",
        "els => els.map(e => [e.dataset.kind, Number(e.dataset.index),"
        " e.querySelectorAll('circle.tw-dot').length, e.getAttribute('class')])",
    )
    yours = {tuple(x) for x in pins["edited_spans"]} | {tuple(x) for x in pins["spans"]}
    tag_marks = 0
    tags = pos_tags(read_tree(mine))
    for kind, index, dots, classes in drawn:
        if kind == "tag":
            p = body["tag_posteriors"][index].get(tags[index], 0.0)
            assert dots == _expected_dots(p), (index, tags[index], p)
            tag_marks += dots > 0
            continue
        label, a, b = spans[index]
        if (a, b, label) in yours:
            assert dots == 0 and "tw-yours" in classes, (label, a, b)
            continue
        p = None if index == 0 else post.get((strip_label(label), a, b), 0.0)
        assert dots == _expected_dots(p), (label, a, b, p)
    # the relabelled constituent is the annotator's, and some tags carry the grammar's doubt
    adjp = ("ADJP", target[1], target[2])
    at = next(i for kind, i, _, _ in drawn if kind == "phrase" and spans[i] == adjp)
    assert next(d for kind, i, d, _ in drawn if kind == "phrase" and i == at) == 0
    # before, the marks came from the grammar's posteriors without what was said: two dots
    free = page.evaluate(
        "async id => (await fetch(`/api/bench/${id}/suggestion`)).json()", ferry["sentence_id"]
    )
    assert {(lab, a, b): p for lab, a, b, p in free["posteriors"]}.get(adjp, 0.0) < 0.2
    assert tag_marks > 0


def _asked(page) -> int:
    return int(page.get_attribute("#bench", "data-answered") or 0)


def _dissolve_answered(page, k: int) -> None:
    """Dissolve phrase k and wait for the grammar's answer to the edit."""
    asked = _asked(page)
    page.click(f"#tree-pane g.tw-phrase[data-index='{k}']")
    page.wait_for_selector(f"#tree-pane g.tw-phrase.tw-selected[data-index='{k}']")
    page.keyboard.press("x")
    page.wait_for_function(
        "n => Number(document.getElementById('bench').dataset.answered || 0) > n",
        arg=asked,
        timeout=60_000,
    )


def _offer_at(page, at: int) -> None:
    """Wait until the offer shows its reading ``at`` (a key or click is handled
    asynchronously); fails after 15 s."""
    page.wait_for_selector(f"#regrow-offer[data-at='{at}']", state="attached", timeout=15_000)


def test_bench_offered_readings_step_take_undo_redo(browser_page, live_server, ferry) -> None:  # noqa: F811
    """After an edit the page offers the re-parse's proposal and the k best readings under what
    was said; G and the reading buttons step through them, g takes the one shown as one
    action, saved as a revision; undo and redo work on it."""
    page = browser_page
    _open(page, live_server.base_url, "ann1", ferry["sentence_id"])
    page.fill("#tree-text", START)
    page.click("[data-cmd='apply-text']")
    wait_tree(page, START)
    wait_saved(page)
    # dissolve phrases one at a time (undoing the ones that bring no choice) until the offer
    # holds at least three readings that differ from the tree
    choices, edited = 0, None
    for k in range(1, len(constituents(read_tree(START)))):
        _dissolve_answered(page, k)
        choices = page.locator("#regrow-readings button").count()
        if choices >= 3:
            edited = shown_tree(page)
            break
        page.keyboard.press("u")
        wait_tree(page, START)
    assert edited is not None, "no dissolve brought three offered readings"
    first = page.get_attribute("#regrow-offer", "data-tree")
    assert page.get_attribute("#regrow-offer", "data-at") == "0" and first != edited
    assert f"1 of {choices}:" in page.text_content("#regrow-offer-text")
    # keyboard: G shows the next one
    page.focus("#tree-pane")
    page.keyboard.press("G")
    _offer_at(page, 1)
    assert page.get_attribute("#regrow-offer", "data-at") == "1"
    second = page.get_attribute("#regrow-offer", "data-tree")
    assert second not in (first, edited)
    assert f"2 of {choices}:" in page.text_content("#regrow-offer-text")
    # mouse: the third button shows the third, the second button back to the second
    page.click("#regrow-readings button:nth-child(3)")
    _offer_at(page, 2)
    assert page.get_attribute("#regrow-offer", "data-at") == "2"
    assert page.get_attribute("#regrow-offer", "data-tree") not in (first, second)
    page.click("#regrow-readings button:nth-child(2)")
    _offer_at(page, 1)
    assert page.get_attribute("#regrow-offer", "data-tree") == second
    # g takes the one shown: one action, saved as a revision of its own
    page.focus("#tree-pane")
    page.keyboard.press("g")
    wait_tree(page, second)
    assert page.is_hidden("#regrow-offer")
    wait_saved(page)
    _ann, revs = stored(live_server, ferry["user_id"], ferry["sentence_id"])
    assert revs[-1].tree == second and revs[-1].source == "reparse"
    assert revs[-1].actions.get("reparse") == 1
    assert write_tree(read_tree(revs[-2].tree)) == edited  # the dissolve before it
    # undo goes back to the edited tree, redo takes the reading again (both saved)
    page.keyboard.press("Control+z")
    wait_tree(page, edited)
    wait_saved(page)
    assert stored(live_server, ferry["user_id"], ferry["sentence_id"])[1][-1].tree == edited
    page.keyboard.press("U")
    wait_tree(page, second)
    wait_saved(page)
    assert stored(live_server, ferry["user_id"], ferry["sentence_id"])[1][-1].tree == second
    # with nothing offered, G says so
    page.keyboard.press("G")
    assert "no re-parse is offered now" in page.text_content("#bench-message")


def test_bench_offers_the_grammars_readings_before_the_first_edit(
    browser_page,
    live_server,
    ferry,  # noqa: F811
) -> None:
    """Opened with nothing said, the page offers the grammar's k best readings that differ
    from the start (not only the readings list's five); G steps, g takes the one shown as one
    action, saved as a revision with nothing said."""
    with live_server.sessionmaker() as db:
        sentence = db.get(Sentence, ferry["sentence_id"])
        version = db.scalar(
            select(GrammarVersion).where(GrammarVersion.corpus_id == sentence.corpus_id)
        )
        g = grammar_for(db, version.id)
        best = [write_tree(t) for t in parse(g, sentence.tokens, k=30).trees]
    page = browser_page
    start = _open(page, live_server.base_url, "ann1", ferry["sentence_id"])
    page.wait_for_selector("#bench[data-asked='1']", timeout=60_000)
    assert page.is_visible("#regrow-offer")
    # the start's own proposal changes nothing, so the offer is the k best that differ from it,
    # best first
    differ = [t for t in best if t != start]
    assert page.locator("#regrow-readings button").count() == len(differ) > 5
    assert page.get_attribute("#regrow-offer", "data-tree") == differ[0]
    page.focus("#tree-pane")
    page.keyboard.press("G")
    _offer_at(page, 1)
    assert page.get_attribute("#regrow-offer", "data-tree") == differ[1]
    page.keyboard.press("g")
    wait_tree(page, differ[1])
    wait_saved(page)
    _ann, revs = stored(live_server, ferry["user_id"], ferry["sentence_id"])
    assert revs[-1].tree == differ[1] and revs[-1].source == "reparse"
    assert revs[-1].actions.get("reparse") == 1
    said = revs[-1].pins
    assert not (said.get("edited_spans") or said.get("removed_spans") or said.get("edited_tags"))


def _bracketing(text: str) -> tuple[Counter, list[str]]:
    """A tree's brackets (root excluded) and tags: what PARSEVAL compares."""
    t = read_tree(text)
    return Counter(constituents(t)[1:]), pos_tags(t)


def _inside(tree_text: str, reading_text: str, s: int, e: int) -> tuple[Counter, list[str]]:
    """The brackets and tags of the tree with what the reading has inside words s..e-1 (its
    brackets strictly inside and the tags of those words), the rest kept: written here from
    the rule, independently of treemodel.js's graftInside."""
    tree, reading = read_tree(tree_text), read_tree(reading_text)
    items = [b for b in constituents(tree)[1:] if not (s <= b[1] and b[2] <= e) or b[1:] == (s, e)]
    items += [b for b in constituents(reading)[1:] if s <= b[1] and b[2] <= e and b[1:] != (s, e)]
    tags = pos_tags(tree)
    tags[s:e] = pos_tags(reading)[s:e]
    return Counter(items), tags


def _find_inside(page, tree_text: str) -> tuple[int, tuple[Counter, list[str]]] | None:
    """Step through the offer (G) to a reading and a phrase of the tree whose inside, taken,
    gives neither the tree nor the whole reading: (the phrase's id, the expected bracketing)."""
    spans = constituents(read_tree(tree_text))
    page.focus("#tree-pane")
    for _ in range(max(1, page.locator("#regrow-readings button").count())):
        reading = page.get_attribute("#regrow-offer", "data-tree")
        for k, (_lab, s, e) in enumerate(spans[1:], start=1):
            want = _inside(tree_text, reading, s, e)
            if want not in (_bracketing(tree_text), _bracketing(reading)):
                return k, want
        page.keyboard.press("G")
    return None


def test_bench_takes_an_offered_reading_inside_the_chosen_constituent(
    browser_page,
    live_server,
    ferry,  # noqa: F811
) -> None:
    """i (or Take inside) takes what the reading shown has inside the chosen constituent and
    keeps the rest of the tree: one action, saved as a revision (the database holds the
    intended bracketing), undone by one undo; with nothing offered, i says so."""
    page = browser_page
    start = _open(page, live_server.base_url, "ann1", ferry["sentence_id"])
    page.wait_for_selector("#bench[data-asked='1']", timeout=60_000)
    assert page.is_visible("#regrow-offer")
    found = _find_inside(page, start)
    assert found is not None, "no offered reading differs from the start inside a phrase only"
    k, want = found
    page.click(f"#tree-pane g.tw-phrase[data-index='{k}']")
    page.wait_for_selector(f"#tree-pane g.tw-phrase.tw-selected[data-index='{k}']")
    page.keyboard.press("i")
    page.wait_for_function(
        "t => document.querySelector('#tree-pane svg.tw-tree').dataset.tree !== t", arg=start
    )
    wait_saved(page)
    assert _bracketing(shown_tree(page)) == want
    _ann, revs = stored(live_server, ferry["user_id"], ferry["sentence_id"])
    assert _bracketing(revs[-1].tree) == want and revs[-1].source == "reparse"
    assert revs[-1].actions.get("reparse") == 1
    assert page.is_hidden("#regrow-offer")
    # one undo brings the start back, saved
    page.keyboard.press("u")
    wait_tree(page, start)
    wait_saved(page)
    assert (
        write_tree(
            read_tree(stored(live_server, ferry["user_id"], ferry["sentence_id"])[1][-1].tree)
        )
        == start
    )
    page.keyboard.press("i")
    assert "no re-parse is offered now" in page.text_content("#bench-message")
    # the mouse: after an edit (a dissolve) the button takes the reading inside the phrase
    taken = None
    for j in range(1, len(constituents(read_tree(start)))):
        _dissolve_answered(page, j)
        edited = shown_tree(page)
        taken = _find_inside(page, edited) if page.is_visible("#regrow-offer") else None
        if taken is not None:
            break
        page.keyboard.press("u")
        wait_tree(page, start)
    assert taken is not None, "no dissolve brought a reading to take inside a phrase"
    k, want = taken
    wait_saved(page)
    before = stored(live_server, ferry["user_id"], ferry["sentence_id"])[1][-1]
    page.click(f"#tree-pane g.tw-phrase[data-index='{k}']")
    page.wait_for_selector(f"#tree-pane g.tw-phrase.tw-selected[data-index='{k}']")
    page.click("[data-cmd='take-inside']")
    page.wait_for_function(
        "t => document.querySelector('#tree-pane svg.tw-tree').dataset.tree !== t", arg=edited
    )
    wait_saved(page)
    revs = stored(live_server, ferry["user_id"], ferry["sentence_id"])[1]
    assert _bracketing(revs[-1].tree) == want and revs[-1].source == "reparse"
    assert revs[-1].actions.get("reparse", 0) == before.actions.get("reparse", 0) + 1
