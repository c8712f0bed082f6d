"""Pages show a sentence's words as written (a bracket, not its escape) and count in words
("1 pair", "2 sentences"); the escapes stay in bracketed text. Invented ferry-log text."""

from __future__ import annotations

from app.wording import as_written, plural
from tests.app.bench_helpers import assign, make_corpus

# stored as a bracketed import stores it: the brackets escaped
ESCAPED = "The mate -LRB- on watch -RRB- logged f-LRB-x-RRB- ."
WRITTEN = "The mate ( on watch ) logged f(x) ."


def test_plural_and_as_written() -> None:
    assert plural(1, "pair") == "1 pair"
    assert plural(0, "pair") == "0 pairs"
    assert plural(4, "sentence") == "4 sentences"
    assert plural(2, "entry", "entries") == "2 entries"
    assert as_written(ESCAPED) == WRITTEN
    assert as_written("-LSB- a -RSB- -LCB- b -RCB-") == "[ a ] { b }"


def test_queue_corpus_and_bench_show_words_as_written(db, people, login) -> None:
    corpus, [s] = make_corpus(db, [ESCAPED])
    assign(db, [s], people.ann1)
    ann1 = login("ann1")
    queue = ann1.client.get("/queue").text
    assert WRITTEN in queue and "-LRB-" not in queue
    bench = ann1.client.get(f"/bench/{s.id}").text
    line = bench.split('id="sentence-text">', 1)[1].split("</p>", 1)[0]
    assert line == WRITTEN
    page = login("admin").client.get(f"/corpora/{corpus.id}").text
    assert WRITTEN in page and "-LRB-" not in page


def test_assign_notice_counts_in_words(db, people, login) -> None:
    corpus, sentences = make_corpus(db, ["one line only ."])
    admin = login("admin")
    resp = admin.client.post(
        f"/corpora/{corpus.id}/assign", data={"csrf_token": admin.csrf, "per_sentence": "1"}
    )
    assert "1 assignment made." in resp.text


def test_the_four_edge_buttons_have_four_glyphs(db, people, login) -> None:
    corpus, [s] = make_corpus(db, ["one line only ."])
    assign(db, [s], people.ann1)
    page = login("ann1").client.get(f"/bench/{s.id}").text
    glyphs = {}
    for cmd in ("edge-start-out", "edge-start-in", "edge-end-in", "edge-end-out"):
        button = page.split(f'data-cmd="{cmd}"', 1)[1].split("</button>", 1)[0]
        glyphs[cmd] = button.split(">", 1)[1].split("<kbd>", 1)[0].strip()
    assert len(set(glyphs.values())) == 4 and all(glyphs.values()), glyphs
