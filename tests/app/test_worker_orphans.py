"""After ``kill -9`` of the server, its training worker and multiprocessing's resource tracker
exit too (the worker watches its parent; the tracker ends with the last holder of its pipe)."""

from __future__ import annotations

import os
import signal
import time

import pytest

from tests.app.bench_helpers import make_corpus
from tests.app.conftest import PASSWORD
from tests.app.live_server import Client, LiveServer
from tests.processes import HAS_PROC, alive, children


@pytest.mark.slow
@pytest.mark.skipif(not HAS_PROC, reason="reads /proc (Linux)")
def test_worker_orphans_exit_when_the_server_is_killed(settings, db, people) -> None:
    corpus, _ = make_corpus(db, ["the tide turned ."])
    server = LiveServer(settings, TREEWRIGHT_TRAINING_IN_PROCESS="false").start()
    try:
        adj = Client(server.url, "adj", PASSWORD)
        resp = adj.http.post(
            "/api/grammars", headers={"X-CSRF-Token": adj.csrf}, json={"corpus_id": corpus.id}
        )
        assert resp.status_code == 202, resp.text
        assert server.proc is not None
        deadline = time.monotonic() + 120
        while len(children(server.proc.pid)) < 2 and time.monotonic() < deadline:
            time.sleep(0.2)  # the worker (spawned) and the resource tracker
        helpers = children(server.proc.pid)
        assert len(helpers) >= 2, helpers
        os.kill(server.proc.pid, signal.SIGKILL)  # the server alone, not its group
        server.proc.wait(timeout=30)
        deadline = time.monotonic() + 30
        while any(alive(p) for p in helpers) and time.monotonic() < deadline:
            time.sleep(0.2)
        left = [p for p in helpers if alive(p)]
        assert left == [], f"still running after the server was killed: {left}"
    finally:
        server.kill()  # whatever is left of the group
