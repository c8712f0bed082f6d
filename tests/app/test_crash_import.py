"""kill -9 during a 5,000-sentence import: afterwards the database is sound and the import is
either whole or absent, and the same import then succeeds.

Two ways in: the ``treewright import`` command (killed the moment its progress bar shows that
rows are being written, so the kill lands inside the write transaction) and the import API of a
live server (killed once the import's write transaction is open, seen from another connection:
at the first sight of it, and after it has been seen open a hundred times in a row). On
PostgreSQL the SQLite integrity check is skipped; the whole-or-absent check still runs.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import httpx
import pytest

from app.settings import PROJECT_ROOT
from tests.app.conftest import PASSWORD, on_postgres
from tests.app.crash_helpers import (
    import_state,
    sentence_file,
    sqlite_problems,
    write_in_progress,
)
from tests.app.live_server import Client, LiveServer, server_env

SENTENCES = 5_000
CLI = [sys.executable, "-c", "from app.cli import main; main()"]


def _check_sound(settings) -> None:  # type: ignore[no-untyped-def]
    if not on_postgres():
        assert sqlite_problems(settings) == []


def _kill_when_writing(
    cmd: list[str], env: dict[str, str], timeout: float = 120.0
) -> tuple[int, bytes]:
    """Run ``cmd``; SIGKILL it as soon as its progress bar reports written rows."""
    proc = subprocess.Popen(
        cmd,
        cwd=PROJECT_ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        start_new_session=True,
    )
    assert proc.stderr is not None and proc.stdout is not None
    seen = b""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        chunk = os.read(proc.stderr.fileno(), 4096)
        if not chunk:
            break  # the command ended before writing anything visible
        seen += chunk
        if f"/{SENTENCES}".encode() in seen:
            os.killpg(proc.pid, signal.SIGKILL)
            break
    else:
        os.killpg(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    out = proc.stdout.read()
    proc.stdout.close()
    proc.stderr.close()
    return proc.returncode, seen + out


@pytest.mark.slow
def test_crash_cli_import_killed_while_writing_is_whole_or_absent(
    settings, app, db, tmp_path: Path
) -> None:
    source = tmp_path / "harbour-log.txt"
    source.write_bytes(sentence_file(SENTENCES, seed=7, tag="log"))
    env = server_env(settings)
    cmd = CLI + ["import", str(source), "--corpus", "Harbour crash", "--as", "text"]
    code, output = _kill_when_writing(cmd, env)
    assert code == -signal.SIGKILL, f"the import was not killed (exit {code}): {output[-300:]!r}"
    _check_sound(settings)
    state = import_state(db, "Harbour crash", SENTENCES)  # raises on a partial import
    print(f"killed during the write phase; the import is {state}")
    db.close()
    if state == "whole":
        return  # the kill came after the commit; nothing left to retry
    # The same import now runs to the end and is stored whole (no leftover lock or half row).
    done = subprocess.run(cmd, cwd=PROJECT_ROOT, env=env, capture_output=True, timeout=300)
    assert done.returncode == 0, done.stderr.decode()[-500:]
    assert import_state(db, "Harbour crash", SENTENCES) == "whole"
    _check_sound(settings)


def _post_import(client: Client, corpus: str, data: bytes, result: dict[str, object]) -> None:
    try:
        resp = client.http.post(
            "/api/corpora/import",
            headers={"X-CSRF-Token": client.csrf},
            data={"corpus_name": corpus, "kind": "text"},
            files={"upload": ("harbour-log.txt", data, "text/plain")},
            timeout=120,
        )
        result["status"] = resp.status_code
    except httpx.HTTPError as err:
        result["error"] = type(err).__name__


@pytest.mark.slow
def test_crash_api_import_killed_midway_is_whole_or_absent(
    settings, app, people, tmp_path: Path
) -> None:
    db = app.state.sessionmaker()
    data = sentence_file(SENTENCES, seed=11, tag="pier")
    log = tmp_path / "server.log"
    server = LiveServer(settings, log=log).start()
    try:
        admin = Client(server.url, "admin", PASSWORD)
        warm: dict[str, object] = {}  # first use loads lazy modules; keep that out of the timing
        _post_import(admin, "Warm-up", sentence_file(50, seed=3, tag="w"), warm)
        assert warm.get("status") == 201, warm
        started = time.monotonic()
        calibration: dict[str, object] = {}
        _post_import(admin, "Calibration", data, calibration)
        full = time.monotonic() - started
        assert calibration.get("status") == 201, calibration
        assert import_state(db, "Calibration", SENTENCES) == "whole"
        admin.close()
        outcomes: dict[str, dict[str, object]] = {}
        for k, sightings in enumerate((1, 100)):
            admin = Client(server.url, "admin", PASSWORD)
            name = f"Killed import {k}"
            outcomes[name] = {}
            worker = threading.Thread(target=_post_import, args=(admin, name, data, outcomes[name]))
            worker.start()
            seen = 0
            deadline = time.monotonic() + 120
            while seen < sightings and worker.is_alive():
                assert time.monotonic() < deadline, "the import never started writing"
                seen = seen + 1 if write_in_progress(settings) else 0
                time.sleep(0.005)
            server.kill()
            worker.join(timeout=60)
            admin.close()
            _check_sound(settings)
            outcomes[name]["state"] = import_state(db, name, SENTENCES)
            server = LiveServer(settings, log=log).start()
        print(f"full import {full:.2f} s; outcomes {outcomes}")
        assert any("error" in o for o in outcomes.values()), (
            f"no kill landed while an import was running: {outcomes}"
        )
        for o in outcomes.values():
            if "status" in o:  # answered before the kill: then it must be stored whole
                assert o["status"] == 201 and o["state"] == "whole", o
        # after the restart, the same file imports whole
        admin = Client(server.url, "admin", PASSWORD)
        again: dict[str, object] = {}
        _post_import(admin, "After restart", data, again)
        admin.close()
        assert again.get("status") == 201, again
        assert import_state(db, "After restart", SENTENCES) == "whole"
    finally:
        server.stop()
        db.close()
    _check_sound(settings)
