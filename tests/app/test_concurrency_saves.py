"""Twenty clients save at once to a real server on loopback: nothing acknowledged is lost,
nothing is silently overwritten, and every stale save is answered 409.

Eight clients are tabs of one annotator on one sentence (the same annotation: they race);
twelve work alone on twelve different annotations (six annotators times two sentences). Each
client sometimes sends a save based on an older revision on purpose. Each save carries a
marker (the POS tag of the first word) so the database can be checked save by save.

Runs on SQLite (a file in tmp) and, with TREEWRIGHT_TEST_DATABASE_URL, on PostgreSQL.
"""

from __future__ import annotations

import random
import threading
import time
from dataclasses import dataclass
from typing import Any

import pytest
from sqlalchemy import select

from app.models import Annotation, Revision
from tests.app.bench_helpers import assign, make_corpus
from tests.app.conftest import PASSWORD
from tests.app.live_server import Client, LiveServer, add_annotators, marked_tree

HOT_CLIENTS = 8
SOLO_USERS = 6
SOLO_SENTENCES = 2
ROUNDS = 12  # saves per client: the loop is bounded by count...
DEADLINE = 90.0  # ...and by time
STALE_SHARE = 0.25

TEXTS = [
    "The night ferry waited at the outer pier .",
    "Two deckhands coiled the stern line .",
    "Fog closed the harbour before noon .",
]


@dataclass
class Attempt:
    client: int
    annotation_key: tuple[int, int]  # (user id, sentence id)
    base: int
    marker: str
    on_purpose_stale: bool
    status: int
    body: dict[str, Any]


def _worker(
    index: int,
    client: Client,
    sentence_id: int,
    tokens: list[str],
    shared: bool,
    seed: int,
    out: list[Attempt],
    lock: threading.Lock,
    stop_at: float,
) -> None:
    rnd = random.Random(seed)
    head = 0
    for i in range(ROUNDS):
        if time.monotonic() > stop_at:
            break
        if shared:  # another tab may have saved: read the head first, like a reload
            head = client.http.get(f"/api/bench/{sentence_id}").json()["annotation"]["head"]
        stale = head > 0 and rnd.random() < STALE_SHARE
        base = rnd.randrange(0, head) if stale else head
        marker = f"C{index}R{i}"
        resp = client.save(sentence_id, base, marked_tree(tokens, marker))
        body = (
            resp.json()
            if resp.headers.get("content-type", "").startswith("application/json")
            else {"raw": resp.text}
        )
        with lock:
            out.append(
                Attempt(
                    index,
                    (client.user_id, sentence_id),
                    base,
                    marker,
                    stale,
                    resp.status_code,
                    body,
                )
            )
        if resp.status_code == 201:
            head = body["revision"]["number"]
        elif resp.status_code == 409 and not shared:
            head = body["head"]


@pytest.mark.slow
def test_concurrency_twenty_clients_lose_nothing(settings, db, people, rng) -> None:
    solo = add_annotators(db, "deckhand", SOLO_USERS)
    # Empty label and tag sets accept any label, so each save can carry its own marker tag.
    _, sentences = make_corpus(db, TEXTS, labels=[], tags=[])
    assign(db, sentences[:1], people.ann1)
    assign(db, sentences[1 : 1 + SOLO_SENTENCES], *solo)

    attempts: list[Attempt] = []
    lock = threading.Lock()
    with LiveServer(settings) as server:
        plan: list[tuple[Client, Any, bool]] = []
        for _ in range(HOT_CLIENTS):
            plan.append((Client(server.url, "ann1", PASSWORD), sentences[0], True))
        for user in solo:
            for s in sentences[1 : 1 + SOLO_SENTENCES]:
                plan.append((Client(server.url, user.username, PASSWORD), s, False))
        assert len(plan) == 20
        stop_at = time.monotonic() + DEADLINE
        threads = [
            threading.Thread(
                target=_worker,
                args=(
                    i,
                    c,
                    s.id,
                    s.tokens,
                    shared,
                    rng.randrange(1 << 30),
                    attempts,
                    lock,
                    stop_at,
                ),
            )
            for i, (c, s, shared) in enumerate(plan)
        ]
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=DEADLINE + 30)
        assert not any(t.is_alive() for t in threads), "a client thread hung"
        for c, _, _ in plan:
            c.close()

    assert len(attempts) == 20 * ROUNDS, "some clients stopped early (deadline reached)"
    raced = sum(1 for a in attempts if a.status == 409 and not a.on_purpose_stale)
    print(
        f"{len(attempts)} saves: {sum(a.status == 201 for a in attempts)} stored, "
        f"{sum(a.on_purpose_stale for a in attempts)} stale on purpose, {raced} lost a race"
    )
    odd = [(a.status, a.body) for a in attempts if a.status not in (201, 409)]
    assert not odd, f"answers other than 201/409: {odd[:5]}"

    acked: dict[tuple[tuple[int, int], int], Attempt] = {}
    for a in attempts:
        if a.status == 201:
            number = a.body["revision"]["number"]
            assert number == a.base + 1, f"save based on {a.base} stored as {number}"
            assert a.body["revision"]["tree"] == marked_tree(
                next(s.tokens for s in sentences if s.id == a.annotation_key[1]), a.marker
            )
            key = (a.annotation_key, number)
            assert key not in acked, f"two saves acknowledged as revision {key}: overwrite"
            acked[key] = a
        else:
            assert a.body["head"] > a.base, f"409 although base {a.base} was the head: {a.body}"
            if a.body["current"] is not None:
                assert a.body["current"]["number"] == a.body["head"]
        if a.on_purpose_stale:
            assert a.status == 409, f"stale save (base {a.base}) was accepted: {a.body}"
    solo_fresh = [a for a in attempts if a.client >= HOT_CLIENTS and not a.on_purpose_stale]
    assert all(a.status == 201 for a in solo_fresh), "a fresh save without rivals was refused"
    assert any(a.on_purpose_stale for a in attempts)

    db.expire_all()
    stored: dict[tuple[tuple[int, int], int], str] = {}
    for ann in db.scalars(select(Annotation)):
        revs = db.scalars(
            select(Revision).where(Revision.annotation_id == ann.id).order_by(Revision.number)
        ).all()
        assert [r.number for r in revs] == list(range(1, ann.head + 1)), (
            f"annotation {ann.id}: revisions {[r.number for r in revs]} but head {ann.head}"
        )
        for r in revs:
            stored[((ann.user_id, ann.sentence_id), r.number)] = r.tree
    # Every acknowledged save is stored under its number with its own marker, and nothing is
    # stored that was not acknowledged (every request got its answer).
    assert set(stored) == set(acked)
    for key, a in acked.items():
        assert f"({a.marker} " in stored[key], f"revision {key} holds another save's tree"
    hot = [a for a in attempts if a.client < HOT_CLIENTS and a.status == 201]
    assert len(hot) >= ROUNDS, "the shared annotation took too few saves to mean anything"
