"""After ``kill -9`` of the server, its training worker and multiprocessing's resource tracker
exit too (the worker watches its parent; the tracker ends with the last holder of its pipe)."""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import pytest

from tests.app.bench_helpers import make_corpus
from tests.app.conftest import PASSWORD
from tests.app.live_server import Client, LiveServer


def _children(pid: int) -> list[int]:
    """Processes whose parent is ``pid`` (read from /proc, Linux)."""
    out = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            out.append(int(entry.name))
    return out


def _alive(pid: int) -> bool:
    try:
        state = (Path("/proc") / str(pid) / "stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads /proc (Linux)")
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
        while len(_children(server.proc.pid)) < 2 and time.monotonic() < deadline:
            time.sleep(0.2)  # the worker (spawned) and the resource tracker
        helpers = _children(server.proc.pid)
        assert len(helpers) >= 2, helpers
        os.kill(server.proc.pid, signal.SIGKILL)  # the server alone, not its group
        server.proc.wait(timeout=30)
        deadline = time.monotonic() + 30
        while any(_alive(p) for p in helpers) and time.monotonic() < deadline:
            time.sleep(0.2)
        left = [p for p in helpers if _alive(p)]
        assert left == [], f"still running after the server was killed: {left}"
    finally:
        server.kill()  # whatever is left of the group
