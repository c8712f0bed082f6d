"""kill -9 during a burst of saves: after a restart the database is sound, every acknowledged
save is there with its own tree, revision numbers have no gaps, and saving goes on.

Ten clients (five annotators times two sentences) save as fast as they can to a live server on
loopback; the server is killed while they do. A save that was in flight may or may not have
been stored (its client never heard back), but nothing that was acknowledged may be missing.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field

import httpx
import pytest
from sqlalchemy import select

from app.models import Annotation, Revision
from tests.app.bench_helpers import assign, make_corpus
from tests.app.conftest import PASSWORD, on_postgres
from tests.app.crash_helpers import sqlite_problems
from tests.app.live_server import Client, LiveServer, add_annotators, marked_tree

USERS = 5
MAX_SAVES = 400  # per client; the kill normally stops them long before
#: The kill comes once every client has this many acknowledged saves (a condition, not a time).
ACKED_BEFORE_KILL = 3
TEXTS = ["The relief skipper logged the tide at six .", "Rain delayed the cargo ramp repairs ."]


@dataclass
class Stream:
    client: Client
    sentence_id: int
    tokens: list[str]
    acked: dict[int, str] = field(default_factory=dict)  # revision number -> marker
    unanswered: int = 0
    other: list[int] = field(default_factory=list)


def _burst(stream: Stream, index: int, stop_at: float) -> None:
    head = 0
    for i in range(MAX_SAVES):
        if time.monotonic() > stop_at:
            return
        marker = f"K{index}S{i}"
        try:
            resp = stream.client.save(stream.sentence_id, head, marked_tree(stream.tokens, marker))
        except httpx.HTTPError:
            stream.unanswered += 1
            return  # the server is gone
        if resp.status_code != 201:
            stream.other.append(resp.status_code)
            return
        head = resp.json()["revision"]["number"]
        stream.acked[head] = marker


@pytest.mark.slow
def test_crash_saves_acknowledged_survive_kill(settings, db, people, tmp_path) -> None:
    users = add_annotators(db, "rigger", USERS)
    _, sentences = make_corpus(db, TEXTS, labels=[], tags=[])
    assign(db, sentences, *users)
    log = tmp_path / "server.log"

    server = LiveServer(settings, log=log).start()
    try:
        streams = [
            Stream(Client(server.url, u.username, PASSWORD, timeout=20), s.id, s.tokens)
            for u in users
            for s in sentences
        ]
        stop_at = time.monotonic() + 60
        threads = [
            threading.Thread(target=_burst, args=(st, i, stop_at)) for i, st in enumerate(streams)
        ]
        for t in threads:
            t.start()
        deadline = time.monotonic() + 45
        while not all(len(st.acked) >= ACKED_BEFORE_KILL for st in streams):
            assert time.monotonic() < deadline, "the clients' saves did not get going"
            assert all(t.is_alive() for t in threads), [st.other for st in streams]
            time.sleep(0.01)
        server.kill()
        for t in threads:
            t.join(timeout=60)
        assert not any(t.is_alive() for t in threads)
        for st in streams:
            st.client.close()
    finally:
        server.kill()

    acked = sum(len(st.acked) for st in streams)
    print(
        f"{acked} saves acknowledged before the kill; "
        f"{sum(st.unanswered for st in streams)} in flight"
    )
    assert all(not st.other for st in streams), [st.other for st in streams]
    assert acked >= len(streams), "too few saves before the kill to test anything"
    assert any(st.unanswered for st in streams), "the kill did not interrupt any save"
    if not on_postgres():
        assert sqlite_problems(settings) == []

    db.expire_all()
    by_key = {(a.user_id, a.sentence_id): a for a in db.scalars(select(Annotation))}
    for st in streams:
        ann = by_key.get((st.client.user_id, st.sentence_id))
        assert ann is not None or not st.acked
        if ann is None:
            continue
        revs = {
            r.number: r.tree
            for r in db.scalars(select(Revision).where(Revision.annotation_id == ann.id))
        }
        assert sorted(revs) == list(range(1, ann.head + 1)), "revision numbers have gaps"
        for number, marker in st.acked.items():
            assert number in revs, f"acknowledged revision {number} is missing"
            assert f"({marker} " in revs[number], f"revision {number} holds another tree"
        # at most the one save in flight can be stored without an acknowledgement
        assert ann.head - len(st.acked) in (0, st.unanswered)

    # The restarted server goes on from the stored heads.
    with LiveServer(settings, log=log) as again:
        for st in streams[:2]:
            me = Client(again.url, st.client.username, PASSWORD)
            head = me.http.get(f"/api/bench/{st.sentence_id}").json()["annotation"]["head"]
            resp = me.save(st.sentence_id, head, marked_tree(st.tokens, "AFTER"))
            assert resp.status_code == 201, resp.text
            assert resp.json()["revision"]["number"] == head + 1
            me.close()
