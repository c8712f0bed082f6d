"""The Bench's key help tells the truth: the test reads the help as a person sees it (each key
paired with the description drawn on the same line beside it) and, for every line, presses the
key and checks that it does what the description says.

The expected effect of each description is written here, apart from the page's key table, so
a key paired with the wrong words fails. The sentences and the small grammar come from the
invented demo corpus (app/demo, a ferry cooperative)."""

from __future__ import annotations

import re
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import select

from app.models import User
from parser.grammar import train_grammar
from parser.trees import read_trees
from tests.app.bench_helpers import assign, install_grammar, make_corpus
from tests.browser.conftest import login_as

DEMO = Path(__file__).resolve().parents[2] / "app" / "demo"
SENTENCES = [
    "The bilge alarm went off twice on Wednesday .",
    "The mate checked the starboard gearbox after the crossing .",
    "Wrennick noticed a smell near the alternator .",
]
# Playwright names of the keys the help draws
KEY_NAMES = {
    "↑": "ArrowUp",
    "↓": "ArrowDown",
    "←": "ArrowLeft",
    "→": "ArrowRight",
    "Esc": "Escape",
    "Del": "Delete",
    "⏎": "Enter",
    "Ctrl": "Control",
    "1…9": "1",
}


def _grammar_bytes(tmp_path: Path) -> bytes:
    trees = []
    for path in sorted(DEMO.glob("gold_*.ptb")):
        trees.extend(read_trees(path.read_text(encoding="utf-8"), source=path.name))
    out = tmp_path / "demo.npz"
    train_grammar(trees).save(out)
    return out.read_bytes()


@pytest.fixture
def bench(live_server, tmp_path) -> dict[str, Any]:
    with live_server.sessionmaker() as db:
        corpus, sentences = make_corpus(db, SENTENCES, labels=[], tags=[])
        ann1 = db.scalar(select(User).where(User.username == "ann1"))
        assign(db, sentences, ann1)
        install_grammar(db, corpus, _grammar_bytes(tmp_path))
        return {"ids": [s.id for s in sentences], "base": live_server.base_url}


SETTLED = "#save-state[data-state='saved'], #save-state[data-state='fresh']"


def _open(page, bench, index: int = 1) -> None:
    """(Re)open sentence ``index`` once the last change is saved; wait for the doubt marks."""
    if page.locator("#save-state").count():
        page.wait_for_selector(SETTLED)
    page.goto(f"{bench['base']}/bench/{bench['ids'][index]}")
    page.wait_for_function(
        "() => document.getElementById('bench').dataset.ready === '1' && "
        "!document.getElementById('doubt-state').textContent"
        ".includes('being computed')",
        timeout=60_000,
    )
    page.wait_for_selector(SETTLED)
    page.locator("#tree-pane").focus()


def read_help(page) -> list[tuple[list[str], str]]:
    """(key alternatives, description) as drawn: a key cell and the description whose top is
    level with it, nearest on its right. Each alternative is a chord in Playwright's form."""
    page.keyboard.press("?")
    page.wait_for_selector("#help:not([hidden])")
    found = page.evaluate("""() => {
      const box = (e) => e.getBoundingClientRect();
      const help = document.getElementById('help');
      const keys = [...help.querySelectorAll('dt, .help-keys')].filter(e => e.querySelector('kbd'));
      const texts = [...help.querySelectorAll('dd, .help-text')];
      return keys.map(k => {
        const kb = box(k);
        const beside = texts.filter(t => Math.abs(box(t).top - kb.top) < 4 && box(t).left > kb.left)
          .sort((a, b) => box(a).left - box(b).left)[0];
        const chords = [];
        let chord = [];
        for (const node of k.childNodes) {
          if (node.nodeName === 'KBD') chord.push(node.textContent.trim());
          else if (node.textContent.trim() === '+') continue;
          else if (chord.length) { chords.push(chord); chord = []; }
        }
        if (chord.length) chords.push(chord);
        return [chords, beside ? beside.textContent.trim() : ''];
      });
    }""")
    page.keyboard.press("Escape")
    page.wait_for_selector("#help", state="hidden")
    return [([_chord(chord) for chord in chords], text) for chords, text in found]


def _chord(keys: list[str]) -> str:
    """A chord as Playwright presses it: the help writes Ctrl+Z, a person types Ctrl and z."""
    names = [KEY_NAMES.get(k, k) for k in keys]
    if "Control" in names and "Shift" not in names:
        names = [n.lower() if len(n) == 1 else n for n in names]
    return "+".join(names)


# ------------------------------------------------------------------ what the page shows
def selected(page) -> tuple[str, int] | None:
    found = page.evaluate("""() => {
      const g = document.querySelector('#tree-pane g.tw-selected');
      if (!g) return null;
      return [g.classList.contains('tw-phrase') ? 'phrase' : 'tag', Number(g.dataset.index)];
    }""")
    return tuple(found) if found else None


def choose(page, kind: str, index: int) -> None:
    page.click(f"#tree-pane g.tw-{kind}[data-index='{index}'] text")
    assert selected(page) == (kind, index)
    page.locator("#tree-pane").focus()


def tree(page) -> str:
    return page.get_attribute("#tree-pane svg.tw-tree", "data-tree")


def info(page) -> str:
    return page.inner_text("#selection-info")


def message(page) -> str:
    return page.inner_text("#bench-message")


def focused(page) -> str:
    return page.evaluate(
        "() => document.activeElement && (document.activeElement.id || "
        "document.activeElement.closest('[id]').id)"
    )


def inner_phrase(page) -> int:
    """A phrase that is neither the root nor its only child, with words on both sides."""
    return page.evaluate("""() => {
      const t = document.querySelector('#tree-pane svg.tw-tree');
      const gs = [...t.querySelectorAll('g.tw-phrase')].map(g => Number(g.dataset.index));
      return gs.filter(i => i > 1).slice(-2)[0] ?? gs[gs.length - 1];
    }""")


# ------------------------------------------------------------------ the expected effects
def parent_child(page, keys, bench) -> None:
    choose(page, "phrase", 1)
    page.keyboard.press(keys[0])  # up: the parent
    assert selected(page) == ("phrase", 0)
    page.keyboard.press(keys[1])  # down: the first child
    assert selected(page) == ("phrase", 1)


def siblings(page, keys, bench) -> None:
    choose(page, "tag", 1)
    page.keyboard.press(keys[0])  # previous word's tag
    assert selected(page) == ("tag", 0)
    page.keyboard.press(keys[1])
    assert selected(page) == ("tag", 1)


def reading_order(page, keys, bench) -> None:
    choose(page, "phrase", 0)
    page.keyboard.press(keys[0])  # next node in pre-order: the root's first child
    assert selected(page) == ("phrase", 1)
    page.keyboard.press(keys[1])
    assert selected(page) == ("phrase", 0)


def the_root(page, keys, bench) -> None:
    choose(page, "tag", 3)
    page.keyboard.press(keys[0])
    assert selected(page) == ("phrase", 0)


def doubtful(page, keys, bench) -> None:
    choose(page, "phrase", 0)
    page.keyboard.press(keys[0])
    now = selected(page)
    if now == ("phrase", 0):
        assert message(page) == "No doubtful constituent left."
    else:  # a dotted (doubtful) constituent
        assert now[0] == "phrase"
        assert page.locator("#tree-pane g.tw-selected circle.tw-dot").count() > 0


def word_range(page, keys, bench) -> None:
    choose(page, "tag", 2)
    page.keyboard.press(keys[1])  # grow right
    assert info(page).startswith("Words 3–4:")
    page.keyboard.press(keys[0])  # shrink back
    assert info(page).startswith("Word 3:")


def constituent_words(page, keys, bench) -> None:
    index = inner_phrase(page)
    choose(page, "phrase", index)
    before = info(page)
    page.keyboard.press(keys[0])
    span = re.search(r"(words? [\d–]+)", before).group(1)
    assert info(page).lower().startswith(span.lower() + ":")


def leave(page, keys, bench) -> None:
    choose(page, "tag", 0)
    page.keyboard.press("Shift+ArrowRight")
    assert info(page).startswith("Words")
    page.keyboard.press(keys[0])  # the word range goes
    assert selected(page) == ("tag", 0) and not info(page).startswith("Words")
    page.keyboard.press(keys[0])  # then the choice
    assert selected(page) is None and info(page).startswith("Nothing chosen")


def _prompt_title(page) -> str:
    page.wait_for_selector("#prompt:not([hidden])")
    title = page.inner_text("#prompt-title")
    page.keyboard.press("Escape")
    page.wait_for_selector("#prompt", state="hidden")
    return title


def add(page, keys, bench) -> None:
    choose(page, "tag", 0)
    page.keyboard.press("Shift+ArrowRight")
    page.keyboard.press(keys[0])
    assert _prompt_title(page).startswith("New constituent over")


def add_pinned(page, keys, bench) -> None:
    choose(page, "tag", 0)
    page.keyboard.press("Shift+ArrowRight")
    page.keyboard.press(keys[0])
    assert _prompt_title(page).startswith("New pinned constituent over")


def relabel(page, keys, bench) -> None:
    choose(page, "phrase", 1)
    page.keyboard.press(keys[0])
    assert _prompt_title(page).startswith("Relabel")


def dissolve(page, keys, bench) -> None:
    before = tree(page)
    choose(page, "phrase", inner_phrase(page))
    page.keyboard.press(keys[0])
    page.wait_for_function(
        "t => document.querySelector('#tree-pane svg.tw-tree').dataset.tree !== t", arg=before
    )
    assert tree(page).count("(") == before.count("(") - 1


def carry(page, keys, bench) -> None:
    # the first node that has somewhere else to go (a refusal says why; try the next one)
    count = page.locator("#tree-pane g.tw-tag").count()
    for kind, index in [("tag", i) for i in range(count)]:
        choose(page, kind, index)
        page.keyboard.press(keys[0])
        if message(page).startswith("Taken: walk to the new parent"):
            assert page.locator("#tree-pane g.tw-carried").count() == 1
            page.keyboard.press("Escape")
            assert message(page) == "Left where it was."
            return
        assert "nowhere else" in message(page)
    raise AssertionError("no word could be taken anywhere")


def _edge(page, keys, bench, side: str) -> None:
    for key in keys:
        _open(page, bench)
        index = inner_phrase(page)
        choose(page, "phrase", index)
        before = info(page)
        page.keyboard.press(key)
        after = info(page)
        # the chosen constituent now covers one word more or less on that side
        nums = [
            list(map(int, re.findall(r"\d+", re.search(r"words? [\d–]+", t).group(0))))
            for t in (before, after)
        ]
        b, a = nums[0], nums[1]
        b = b if len(b) == 2 else b * 2
        a = a if len(a) == 2 else a * 2
        if side == "left":
            assert a[1] == b[1] and abs(a[0] - b[0]) == 1, (key, before, after)
        else:
            assert a[0] == b[0] and abs(a[1] - b[1]) == 1, (key, before, after)


def left_edge(page, keys, bench) -> None:
    _edge(page, keys, bench, "left")


def right_edge(page, keys, bench) -> None:
    _edge(page, keys, bench, "right")


def pins(page) -> str:
    return page.inner_text("#pin-count")


def pin(page, keys, bench) -> None:
    choose(page, "phrase", 1)
    before = pins(page)
    page.keyboard.press(keys[0])
    after = pins(page)
    assert after != before and {before.split(",")[0], after.split(",")[0]} == {
        "Pinned: 0 constituents",
        "Pinned: 1 constituent",
    }
    page.keyboard.press(keys[0])
    assert pins(page) == before


def regrow(page, keys, bench) -> None:
    page.keyboard.press(keys[0])
    page.wait_for_function(
        "() => /^Re-?pars/.test(document.getElementById('bench-message')"
        ".textContent) && !/…$/.test(document.getElementById("
        "'bench-message').textContent)"
    )


def offered_readings(page, keys, bench) -> None:
    # with an offer shown (the sentence carries edits from the rows before) the next reading is
    # shown; with none, the page says so (an offer is stepped through in test_bench_loop.py)
    if page.is_visible("#regrow-offer"):
        n = max(1, page.locator("#regrow-readings button").count())
        at = int(page.get_attribute("#regrow-offer", "data-at"))
        page.keyboard.press(keys[0])
        page.wait_for_selector(  # the key is handled asynchronously
            f"#regrow-offer[data-at='{(at + 1) % n}']", state="attached", timeout=15_000
        )
        assert page.get_attribute("#regrow-offer", "data-at") == str((at + 1) % n)
        return
    page.keyboard.press(keys[0])
    page.wait_for_function(
        "() => document.getElementById('bench-message').textContent"
        ".includes('no re-parse is offered now')"
    )


def take_inside(page, keys, bench) -> None:
    # with an offer shown and a phrase chosen, the reading shown is taken inside it (or the
    # page says it changes nothing there); with none, the page says so (the tree taken is
    # checked against the database in test_bench_loop.py)
    offered = page.is_visible("#regrow-offer")
    choose(page, "phrase", 1)
    page.keyboard.press(keys[0])
    if offered:
        page.wait_for_function(
            "() => /taken inside|changes nothing inside/.test("
            "document.getElementById('bench-message').textContent)"
        )
        return
    page.wait_for_function(
        "() => document.getElementById('bench-message').textContent"
        ".includes('no re-parse is offered now')"
    )


def readings(page, keys, bench) -> None:
    page.keyboard.press(keys[0])
    assert page.evaluate("() => document.activeElement.closest('#readings') !== null")


def reading_n(page, keys, bench) -> None:
    page.keyboard.press(keys[0])  # "1": the grammar's best tree
    page.wait_for_function(
        "() => document.getElementById('bench-message').textContent.startsWith('Started from')"
    )
    assert message(page).startswith("Started from reading 1")


def undo(page, keys, bench) -> None:
    choose(page, "phrase", 1)
    before = pins(page)
    page.keyboard.press("p")  # an edit to take back
    after = pins(page)
    assert after != before
    for key in keys:
        page.keyboard.press(key)
        assert pins(page) == before, key
        page.keyboard.press("U")
        assert pins(page) == after


def redo(page, keys, bench) -> None:
    choose(page, "phrase", 1)
    before = pins(page)
    page.keyboard.press("p")
    after = pins(page)
    for key in keys:
        page.keyboard.press("u")
        assert pins(page) == before
        page.keyboard.press(key)
        assert pins(page) == after, key


def history(page, keys, bench) -> None:
    page.keyboard.press(keys[0])
    page.wait_for_selector("#history:not([hidden])")
    page.keyboard.press("Escape")


def focus_on(element_id: str) -> Callable[..., None]:
    def check(page, keys, bench) -> None:
        page.keyboard.press(keys[0])
        assert focused(page) == element_id
        page.keyboard.press("Escape")
        page.locator("#tree-pane").focus()

    return check


def hand_in(page, keys, bench) -> None:
    page.keyboard.press(keys[0])
    page.wait_for_selector("#confirm:not([hidden])")
    assert "hand" in page.inner_text("#confirm-text").lower()
    page.click("#confirm-no")


def goes_to(index_of: Callable[[dict[str, Any]], int]) -> Callable[..., None]:
    def check(page, keys, bench) -> None:
        page.wait_for_selector(SETTLED)
        page.keyboard.press(keys[0])
        page.wait_for_url(f"**/bench/{index_of(bench)}")

    return check


def queue_steps(page, keys, bench) -> None:
    page.keyboard.press(keys[0])  # ",": the previous sentence
    page.wait_for_url(f"**/bench/{bench['ids'][0]}")
    _open(page, bench)
    page.keyboard.press(keys[1])  # ".": the next one
    page.wait_for_url(f"**/bench/{bench['ids'][2]}")


def zoom(page, keys, bench) -> None:
    page.keyboard.press(keys[0])
    assert page.inner_text("#zoom-level") == "120%"
    page.keyboard.press(keys[1])
    assert page.inner_text("#zoom-level") == "100%"
    page.keyboard.press(keys[1])
    page.keyboard.press(keys[2])
    assert page.inner_text("#zoom-level") == "100%"


def tokens(page, keys, bench) -> None:
    choose(page, "tag", 2)
    page.keyboard.press(keys[0])
    page.wait_for_selector("#tokens:not([hidden])")
    assert page.input_value("#tokens-input") == SENTENCES[1].split()[2]
    page.keyboard.press("Escape")
    page.wait_for_selector("#tokens", state="hidden")


def fit_width(page, keys, bench) -> None:
    page.keyboard.press(keys[0])
    # the tree's drawn width now matches the pane's (within the zoom's rounding)
    pane, drawn = page.evaluate("""() => [document.getElementById('tree-pane').clientWidth,
      document.querySelector('#tree-pane svg.tw-tree').getBoundingClientRect().width]""")
    assert abs(drawn - (pane - 8)) < 0.03 * pane or page.inner_text("#zoom-level") == "300%"


def fold(page, keys, bench) -> None:
    index = inner_phrase(page)
    choose(page, "phrase", index)
    tags = page.locator("#tree-pane g.tw-tag").count()
    page.keyboard.press(keys[0])
    assert page.locator("#tree-pane g.tw-tag").count() < tags
    page.keyboard.press(keys[0])
    assert page.locator("#tree-pane g.tw-tag").count() == tags


def families(page, keys, bench) -> None:
    off = "() => document.getElementById('tree-pane').classList.contains('families-off')"
    before = page.evaluate(off)
    page.keyboard.press(keys[0])
    assert page.evaluate(off) != before
    page.keyboard.press(keys[0])
    assert page.evaluate(off) == before


def this_list(page, keys, bench) -> None:
    page.keyboard.press(keys[0])
    page.wait_for_selector("#help:not([hidden])")
    page.keyboard.press("Escape")


#: Description (its start, as the help words it) -> what pressing its keys must do.
EFFECTS: dict[str, Callable[..., None]] = {
    "parent / first child": parent_child,
    "previous / next sibling": siblings,
    "next / previous node in reading order": reading_order,
    "the root": the_root,
    "next doubtful constituent": doubtful,
    "choose words: grow or shrink the word range": word_range,
    "choose the words of the chosen constituent": constituent_words,
    "put a carried node back, drop the word range, then the choice": leave,
    "add a bracket over the chosen words": add,
    "add a bracket over the chosen words and pin it": add_pinned,
    "relabel": relabel,
    "dissolve": dissolve,
    "move: take the chosen node": carry,
    "left edge one word out / in": left_edge,
    "right edge one word out / in": right_edge,
    "pin / unpin": pin,
    "regrow": regrow,
    "next offered reading": offered_readings,
    "take the offered reading shown only inside the chosen constituent": take_inside,
    "go to the readings": readings,
    "start from the grammar's n-th best tree": reading_n,
    "undo": undo,
    "redo": redo,
    "history": history,
    "edit the bracketed text": focus_on("tree-text"),
    "hand in": hand_in,
    "write a note": focus_on("note-text"),
    "hold back with a reason": focus_on("hold-reason"),
    "next unfinished sentence": goes_to(lambda b: b["ids"][2]),
    "previous / next in the queue": queue_steps,
    "zoom in / out / reset": zoom,
    "phrase family colours on / off": families,
    "fix the tokens": tokens,
    "fit the tree's width on screen": fit_width,
    "fold / unfold the chosen constituent": fold,
    "this list": this_list,
}


def _effect_of(text: str) -> Callable[..., None] | None:
    matches = [k for k in EFFECTS if text.startswith(k)]
    return EFFECTS[max(matches, key=len)] if matches else None


@pytest.mark.slow
@pytest.mark.browser
def test_every_key_in_the_help_does_what_it_says(browser_page, live_server, bench) -> None:
    page = browser_page
    login_as(page, live_server.base_url, "ann1", next_path=f"/bench/{bench['ids'][1]}")
    _open(page, bench)
    pairs = read_help(page)
    assert len(pairs) >= 25
    unknown = [(keys, text) for keys, text in pairs if _effect_of(text) is None]
    assert not unknown, f"help lines whose words this test does not know: {unknown}"
    checked = set()
    for keys, text in pairs:
        _open(page, bench)
        _effect_of(text)(page, keys, bench)
        checked.add(text)
    assert len(checked) == len(pairs)
    assert page.console_errors == []
