"""The Bench's place in the parse line, in real Chromium: a sentence whose suggestion waits in
the admission pool's line opens on a waiting page that shows how many parses are ahead, counts
down as they finish, and draws the tree once its own parse is done; meanwhile other requests are
answered. The pool is held busy by a gate before each parse (tests/browser/gated_app.py) on a
pool of one slot; the grammar is trained on GUM (Zeldes 2017, CC BY; ../shared/data/gum-trees).
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
from sqlalchemy import select

from app.models import Suggestion, User
from parser.trees import read_tree, words
from tests.app.bench_helpers import (
    assign,
    gum_grammar_bytes,
    heldout_gum_trees,
    install_grammar,
    make_corpus,
)
from tests.app.conftest import PASSWORD
from tests.app.live_server import Client, LiveServer
from tests.browser.conftest import login_as
from tests.browser.gated_app import GATE_ENV, set_gate
from tests.browser.test_bench_cycle import shown_tree

DEADLINE = 60.0


@pytest.fixture
def gated(app, people, tmp_path: Path) -> Iterator[tuple[LiveServer, Path, list[int], Any]]:  # noqa: ARG001
    with app.state.sessionmaker() as db:
        texts = [" ".join(words(t)) for t in heldout_gum_trees(3, min_words=12, max_words=20)]
        corpus, sentences = make_corpus(db, texts, labels=[], tags=[])
        users = db.scalars(select(User).where(User.username.in_(("ann1", "ann2")))).all()
        assign(db, sentences, *users)
        install_grammar(db, corpus, gum_grammar_bytes())
        ids = [s.id for s in sentences]
    gate = tmp_path / "parse-gate"
    set_gate(gate, 0)  # nothing parses until the test says so
    server = LiveServer(
        app.state.settings,
        log=tmp_path / "server.log",
        factory="tests.browser.gated_app:create_app",
        start_timeout=180.0,
        **{
            GATE_ENV: str(gate),
            "TREEWRIGHT_PARSE_SLOTS": "1",
            "TREEWRIGHT_PARSE_PAGE_WAIT_SECONDS": "0.2",
        },
    ).start()
    try:
        yield server, gate, ids, app.state.sessionmaker
    finally:
        set_gate(gate, None)
        server.stop()


def _place(client: Client, sentence_id: int) -> dict[str, Any]:
    resp = client.http.get(f"/api/bench/{sentence_id}/place")
    assert resp.status_code == 200, resp.text
    return dict(resp.json())


def _until(condition: Any, what: str) -> None:
    import time

    deadline = time.monotonic() + DEADLINE
    while time.monotonic() < deadline:
        if condition():
            return
        time.sleep(0.05)
    raise AssertionError(f"not within {DEADLINE} s: {what}")


def _shows(page: Any, text: str) -> None:
    page.wait_for_function(
        "t => document.getElementById('parse-place')?.textContent.trim() === t",
        arg=text,
        timeout=DEADLINE * 1000,
    )


@pytest.mark.slow
def test_bench_shows_its_place_in_the_parse_line_then_the_tree(browser, gated) -> None:
    server, gate, (first, second, mine), sessions = gated
    other = Client(server.url, "ann2", PASSWORD)
    try:
        # two parses in line before ours: the first held running at the gate, the second waiting
        assert _place(other, first)["ready"] is False
        _until(lambda: _place(other, second) == {"ready": False, "ahead": 1}, "second waits")

        page = browser.new_context(viewport={"width": 1400, "height": 900}).new_page()
        errors: list[str] = []
        page.on("pageerror", lambda exc: errors.append(str(exc)))
        login_as(page, server.url, "ann1", next_path=f"/bench/{mine}")
        _shows(page, "waiting: 2 ahead")
        # the server answers other requests while three parses are held
        assert httpx.get(server.url + "/api/health", timeout=5).status_code == 200

        set_gate(gate, 1)  # the first finishes, the second runs
        _shows(page, "waiting: 1 ahead")
        set_gate(gate, 2)  # the second finishes, ours runs
        _shows(page, "parsing now")
        set_gate(gate, None)
        page.wait_for_selector("#bench[data-ready='1']", timeout=DEADLINE * 1000)
        drawn = shown_tree(page)
        with sessions() as db:
            row = db.scalar(select(Suggestion).where(Suggestion.sentence_id == mine))
            assert row is not None and row.consensus
            assert read_tree(drawn) == read_tree(row.consensus)
        assert _place(other, mine) == {"ready": True, "ahead": 0}
        assert errors == []
    finally:
        other.close()
