"""Parse admission: bounded, first come first served, one parse per question, a time limit,
long sentences left unparsed, and saves that never wait for a parse."""

from __future__ import annotations

import threading
import time

import pytest
from sqlalchemy import select

from app.models import Corpus
from app.services import admission as adm
from app.services.admission import ParseAdmission, ParserBusy
from tests.app.bench_helpers import assign, flat_text, make_corpus


def _blocked(gate: threading.Event, log: list[str], name: str, result: object = None):
    def parse() -> object:
        log.append(f"start {name}")
        assert gate.wait(10), "the test never released the parse"
        log.append(f"end {name}")
        return result if result is not None else name

    return parse


def _ask(pool: ParseAdmission, key: str, parse, out: dict[str, object]) -> threading.Thread:
    def go() -> None:
        try:
            out[key] = pool.run(key, parse, wait=10)
        except Exception as exc:  # noqa: BLE001 - the test looks at what came back
            out[key] = exc

    thread = threading.Thread(target=go)
    thread.start()
    return thread


def _until(condition, what: str) -> None:
    deadline = time.monotonic() + 10
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"gave up waiting for {what}")
        time.sleep(0.005)


def test_admission_bounds_parses_and_serves_first_come_first(rng) -> None:
    pool = ParseAdmission(slots=1, threads=1, wait=10)
    gate, log, out = threading.Event(), list[str](), dict[str, object]()
    threads = [_ask(pool, "a", _blocked(gate, log, "a"), out)]
    _until(lambda: pool.running == 1, "a to start")
    for key in "bcd":
        threads.append(_ask(pool, key, _blocked(gate, log, key), out))
        _until(lambda k=key: pool.ahead_of(k) > 0, f"{key} to queue")
    assert [pool.ahead_of(k) for k in "abcd"] == [0, 1, 2, 3]  # running a, then b, c, d
    gate.set()
    for t in threads:
        t.join(10)
    assert out == {k: k for k in "abcd"}
    assert [e for e in log if e.startswith("start")] == ["start a", "start b", "start c", "start d"]
    assert pool.peak_running == 1
    pool.close()


def test_admission_runs_one_parse_for_the_same_question() -> None:
    # nothing kept after the parse: a second call can only share the parse in flight
    pool = ParseAdmission(slots=2, threads=1, wait=10, cache_size=0)
    gate, log, out = threading.Event(), list[str](), dict[str, object]()
    calls: list[int] = []

    def counted() -> str:
        calls.append(1)
        return _blocked(gate, log, "same")()

    first = _ask(pool, "same", counted, out)
    _until(lambda: pool.running == 1, "the first ask to start")
    seconds = [
        threading.Thread(
            target=lambda i=i: out.setdefault(f"again{i}", pool.run("same", counted, wait=10))
        )
        for i in range(3)
    ]
    for t in seconds:
        t.start()
    time.sleep(0.3)  # let the three reach the parse in flight (order only, nothing timed)
    gate.set()
    for t in [first, *seconds]:
        t.join(10)
    assert len(calls) == 1 and set(out.values()) == {"same"} and len(out) == 4
    assert pool.run("same", counted) == "same" and len(calls) == 2  # nothing kept: again
    kept = ParseAdmission(slots=1, threads=1, wait=10)
    assert kept.run("q", counted) == "same" and kept.run("q", counted) == "same"
    assert len(calls) == 3  # the second ask of a kept answer parses nothing
    pool.close()
    kept.close()


def test_admission_time_limit_answers_busy_and_keeps_the_answer() -> None:
    pool = ParseAdmission(slots=1, threads=1, wait=10)
    gate, log, out = threading.Event(), list[str](), dict[str, object]()
    holder = _ask(pool, "long", _blocked(gate, log, "long"), out)
    _until(lambda: pool.running == 1, "the long parse to start")
    calls: list[int] = []

    def short() -> str:
        calls.append(1)
        return "short answer"

    with pytest.raises(ParserBusy) as busy:
        pool.run("short", short, wait=0.05)
    assert busy.value.status_code == 503 and busy.value.extra["ahead"] == 1
    gate.set()
    holder.join(10)
    _until(lambda: pool.cached("short") is not None, "the queued parse to finish")
    assert pool.run("short", short) == "short answer" and len(calls) == 1
    pool.close()


def test_admission_sets_the_numba_threads_of_each_parse() -> None:
    import numba

    pool = ParseAdmission(slots=1, threads=1, wait=30)
    assert pool.run("threads", numba.get_num_threads) == 1
    pool.close()
    assert ParseAdmission(slots=0, threads=1).slots == adm.cores()


@pytest.fixture
def small_pool():
    # a long wait: the first parse of a test process may load the compiled kernels slowly
    pool = adm.configure(slots=1, threads=1, wait=300, max_words=12)
    yield pool
    adm.configure()


def test_long_sentence_is_shown_unparsed_with_a_split_offered(
    db, people, login, small_pool
) -> None:
    from tests.app.bench_helpers import gum_grammar_bytes, install_grammar

    corpus, sentences = make_corpus(db, ["the crew ate", " ".join(["rope"] * 250)])
    install_grammar(db, corpus, gum_grammar_bytes())
    assign(db, sentences, people.ann1)
    me = login("ann1")
    before = small_pool.parses
    long_one = me.client.get(f"/api/bench/{sentences[1].id}").json()
    assert long_one["split_offered"] is True and long_one["source"] == "flat"
    assert "250 words" in long_one["start_note"] and "Split" in long_one["start_note"]
    assert me.client.get(f"/api/bench/{sentences[1].id}/suggestion").json() is None
    reparse = me.client.post(
        f"/api/bench/{sentences[1].id}/reparse",
        headers=me.headers(),
        json={"pins": {"spans": [], "tags": []}, "k": 1},
    )
    assert reparse.status_code == 409 and reparse.json()["kind"] == "too_long"
    assert small_pool.parses == before  # nothing was parsed for it
    short = me.client.get(f"/api/bench/{sentences[0].id}").json()
    assert short["split_offered"] is False and short["suggestion"] is not None
    assert small_pool.parses == before + 1


def test_a_save_does_not_wait_for_busy_parsers(db, people, login, small_pool) -> None:
    corpus, sentences = make_corpus(db, ["the crew ate", "the gulls circled"])
    assign(db, sentences[:1], people.ann1)
    assign(db, sentences[1:], people.ann2)
    from app.services.suggestions import grammar_from_bytes
    from parser.chart import parse
    from tests.app.bench_helpers import gum_grammar_bytes

    grammar = grammar_from_bytes(gum_grammar_bytes())
    words = ("the ferry left the harbour at dawn and the crew " * 10).split()[:100]
    gate, log, out = threading.Event(), list[str](), dict[str, object]()

    def long_parse() -> object:  # a real one: seconds of numba kernels
        log.append("start long")
        result = parse(grammar, words, k=5, posteriors=True)
        log.append("end long")
        return result

    holder = _ask(small_pool, "someone's long parse", long_parse, out)
    queued = _ask(small_pool, "another parse", _blocked(gate, log, "next"), out)
    try:
        _until(
            lambda: small_pool.running == 1 and small_pool.waiting == 1,
            "every parse slot to be taken",
        )
        other = login("ann2")
        saved = other.client.post(
            f"/api/bench/{sentences[1].id}/revisions",
            headers=other.headers(),
            json={
                "base": 0,
                "tree": flat_text(["the", "gulls", "circled"]),
                "pins": {},
                "source": "edit",
                "confirm_labels": True,
            },
        )
        # answered while the long parse still runs and another parse still waits
        assert saved.status_code == 201, saved.text
        assert small_pool.running == 1 and small_pool.waiting == 1 and "end long" not in log
        assert other.client.get("/api/health").status_code == 200
    finally:
        gate.set()
        holder.join(10)
        queued.join(10)
    assert db.scalar(select(Corpus.id)) == corpus.id
