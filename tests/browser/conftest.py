"""Browser test fixtures: a live server on a free loopback port and Debian's Chromium driven by
Playwright (sync API). Reusable by every page's browser tests.

Fixtures
    ``live_server``   a started server on a fresh database: uvicorn on a thread of the test
                      process serving the ``app`` fixture (see tests/app/live_server.py), or a
                      uvicorn subprocess for a test marked ``server_process`` (one that needs
                      the server's own process, e.g. to tell it from a training worker);
                      ``.base_url``, ``.settings``, ``.sessionmaker`` (sessions on the same
                      database, to seed rows and read results), ``.log``.
    ``browser``       one headless Chromium per test session (never downloaded: the Debian
                      binary at /usr/bin/chromium).
    ``browser_page``  a fresh context and page per test (1400x900); ``page.console_errors``
                      collects console errors and uncaught page errors.
    ``static_server`` base URL of a plain file server for static/ (no app, no database), one
                      per test session: for checking ES modules in the browser quickly.
    ``output_dir``    ``test-output/<test name>/`` under the repository root (gitignored).
    The app fixtures of tests/app/conftest.py (``settings``, ``db``, ``people``...) are
    available too; ``people`` makes admin, adj, ann1, ann2 with password
    :data:`tests.app.conftest.PASSWORD`.

Helper
    :func:`login_as` fills the login form as a user.

Without /usr/bin/chromium the tests skip with a reason, unless TREEWRIGHT_REQUIRE_BROWSER=1,
which makes that a failure.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy.orm import Session, sessionmaker

from app.settings import PROJECT_ROOT, STATIC_DIR, Settings
from tests.app.conftest import (  # noqa: F401  (fixtures re-exported for browser tests)
    PASSWORD,
    _migrated_sqlite,
    app,
    db,
    login,
    people,
    settings,
)
from tests.app.live_server import LiveServer, ThreadServer

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--no-first-run",
]


def _require_chromium() -> None:
    if CHROMIUM.exists():
        return
    reason = f"Chromium not found at {CHROMIUM} (Debian package 'chromium')"
    if os.environ.get("TREEWRIGHT_REQUIRE_BROWSER") == "1":
        pytest.fail(reason + " and TREEWRIGHT_REQUIRE_BROWSER=1 makes that an error")
    pytest.skip(reason)


@dataclass
class Live:
    base_url: str
    settings: Settings
    sessionmaker: sessionmaker[Session]
    log: Path
    server: LiveServer | ThreadServer


@pytest.fixture
def live_server(app, people, tmp_path: Path, request: pytest.FixtureRequest) -> Iterator[Live]:  # noqa: F811
    """A running server on the test's database (users from ``people`` already exist)."""
    log = tmp_path / "server.log"
    server: LiveServer | ThreadServer
    if request.node.get_closest_marker("server_process") is not None:
        server = LiveServer(app.state.settings, log=log).start()
    else:
        server = ThreadServer(app).start()
    try:
        yield Live(
            base_url=server.url,
            settings=app.state.settings,
            sessionmaker=app.state.sessionmaker,
            log=log,
            server=server,
        )
    finally:
        server.stop()


@pytest.fixture(scope="session")
def static_server() -> Iterator[str]:
    """Serve static/ on a free loopback port; ``/js/x.js`` is static/js/x.js."""
    import functools
    import threading
    from http.server import SimpleHTTPRequestHandler, ThreadingHTTPServer

    class Quiet(SimpleHTTPRequestHandler):
        def log_message(self, *args: Any) -> None:
            pass

    handler = functools.partial(Quiet, directory=str(STATIC_DIR))
    server = ThreadingHTTPServer(("127.0.0.1", 0), handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_address[1]}"
    finally:
        server.shutdown()
        server.server_close()


@pytest.fixture(scope="session")
def browser() -> Iterator[Any]:
    _require_chromium()
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        chromium = pw.chromium.launch(
            executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True
        )
        yield chromium
        chromium.close()


@pytest.fixture
def browser_page(browser) -> Iterator[Any]:
    context = browser.new_context(viewport={"width": 1400, "height": 900})
    page = context.new_page()
    page.set_default_timeout(15_000)
    errors: list[str] = []
    page.on(
        "console",
        lambda msg: (
            errors.append(f"{msg.text} at {msg.location.get('url', '')}")
            if msg.type == "error"
            else None
        ),
    )
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    page.console_errors = errors
    yield page
    context.close()


@pytest.fixture
def output_dir(request: pytest.FixtureRequest) -> Path:
    name = re.sub(r"[^\w.-]+", "_", request.node.name)
    folder = PROJECT_ROOT / "test-output" / name
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def login_as(
    page: Any, base_url: str, username: str, password: str = PASSWORD, next_path: str = "/"
) -> None:
    """Log in through the form; ends on ``next_path``."""
    page.goto(f"{base_url}/login?next={next_path}")
    page.fill("input[name=username]", username)
    page.fill("input[name=password]", password)
    page.click("button[type=submit]")
    page.wait_for_load_state("load")
