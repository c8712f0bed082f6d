"""A large import does not stall everyone else: while an admin's 5,000-sentence upload is
being stored, another user's requests are answered.

Checked by order, not by a time limit: on a live loopback server, requests sent after the
import started must come back before the import does.
"""

from __future__ import annotations

import threading
import time

import pytest

from tests.app.conftest import PASSWORD
from tests.app.crash_helpers import sentence_file, write_in_progress
from tests.app.live_server import Client, LiveServer

SENTENCES = 5_000


@pytest.mark.slow
@pytest.mark.parametrize("route", ["/api/corpora/import", "/transfer/import"])
def test_concurrency_import_leaves_the_server_answering(settings, app, people, route) -> None:
    data = sentence_file(SENTENCES, seed=5, tag="quay")
    done: dict[str, float] = {}
    with LiveServer(settings) as server:
        admin = Client(server.url, "admin", PASSWORD, timeout=120)
        other = Client(server.url, "ann1", PASSWORD)

        def upload() -> None:
            form = {"corpus_name": "Quay log", "kind": "text", "csrf_token": admin.csrf}
            resp = admin.http.post(
                route,
                headers={"X-CSRF-Token": admin.csrf},
                data=form,
                files={"upload": ("quay.txt", data, "text/plain")},
            )
            done["import"] = time.monotonic()
            done["import_status"] = resp.status_code

        worker = threading.Thread(target=upload)
        worker.start()
        deadline = time.monotonic() + 120
        while not write_in_progress(settings) and "import" not in done:  # storing has begun
            assert time.monotonic() < deadline, "the import never started storing"
            time.sleep(0.005)
        answered = 0
        while "import" not in done and answered < 50:
            assert other.http.get("/api/queue").status_code == 200
            answered += 1
            done.setdefault("first_other", time.monotonic())
        worker.join(timeout=180)
        admin.close()
        other.close()
    assert done.get("import_status") in (200, 201, 303), done  # the page redirects
    assert "first_other" in done and done["first_other"] < done["import"], (
        "no other request was answered while the import was being stored"
    )
