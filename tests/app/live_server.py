"""A real Treewright server on a loopback port: in a subprocess (:class:`LiveServer`, for
concurrency, crash and load checks) or on a thread of the test process (:class:`ThreadServer`,
for the browser tests), plus logged-in httpx clients for either.

The server is ``uvicorn app.main:create_app --factory`` (or another ``factory``) with its
settings in the environment (``TREEWRIGHT_DATA_DIR``, ``TREEWRIGHT_DATABASE_URL``...), so it
reads the same database as the test's own session. It binds 127.0.0.1 only. ``kill()`` sends
SIGKILL (no clean shutdown), which is what the crash tests want; ``stop()`` terminates politely.

Limits: one server per instance; start-up waits at most ``start_timeout`` seconds for
``/api/health``.

:class:`ThreadServer` serves an app object the test already built (the ``app`` fixture) with
uvicorn on a thread: no interpreter to start and no modules to import again, so it is up in
milliseconds where a subprocess takes seconds. It shares the test process, so it cannot be
killed and its background training runs as the app's settings say (a thread in the tests).
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

import httpx
from sqlalchemy.orm import Session

from app.models import User
from app.settings import PROJECT_ROOT, Settings

LOOPBACK = "127.0.0.1"


def free_port() -> int:
    """A port the kernel just handed out on loopback (free unless raced by another process)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind((LOOPBACK, 0))
        return int(sock.getsockname()[1])


def server_env(settings: Settings, **extra: str) -> dict[str, str]:
    """The environment that makes a subprocess use ``settings``' database and data folder."""
    env = dict(os.environ)
    env["TREEWRIGHT_DATA_DIR"] = str(Path(settings.data_dir).resolve())
    env["TREEWRIGHT_SECRET_KEY"] = settings.secret_key or "live-server-secret"
    env["TREEWRIGHT_LOGIN_DELAY_SECONDS"] = str(settings.login_delay_seconds)
    if settings.database_url:
        env["TREEWRIGHT_DATABASE_URL"] = settings.database_url
    else:
        env.pop("TREEWRIGHT_DATABASE_URL", None)
    env.update(extra)
    return env


class LiveServer:
    """``with LiveServer(settings) as server:`` runs the app at ``server.url`` until the end."""

    def __init__(
        self,
        settings: Settings,
        *,
        log: Path | None = None,
        workers: int = 1,
        start_timeout: float = 60.0,
        factory: str = "app.main:create_app",
        **env: str,
    ) -> None:
        self.settings = settings
        self.factory = factory
        self.env = server_env(settings, **env)
        self.log = log
        self.workers = workers
        self.start_timeout = start_timeout
        self.port = 0
        self.proc: subprocess.Popen[bytes] | None = None
        self._log_fh: Any = None

    @property
    def url(self) -> str:
        return f"http://{LOOPBACK}:{self.port}"

    def start(self) -> LiveServer:
        self.port = free_port()
        cmd = [
            sys.executable,
            "-m",
            "uvicorn",
            self.factory,
            "--factory",
            "--host",
            LOOPBACK,
            "--port",
            str(self.port),
            "--log-level",
            "warning",
            "--workers",
            str(self.workers),
        ]
        if self.log is not None:
            self._log_fh = open(self.log, "ab")  # noqa: SIM115 - closed in _reap
        out = self._log_fh if self._log_fh is not None else subprocess.DEVNULL
        self.proc = subprocess.Popen(
            cmd,
            cwd=PROJECT_ROOT,
            env=self.env,
            stdout=out,
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        deadline = time.monotonic() + self.start_timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(
                    f"server exited with {self.proc.returncode} on start; log: {self.log}"
                )
            try:
                if httpx.get(self.url + "/api/health", timeout=2).status_code == 200:
                    return self
            except httpx.HTTPError:
                pass
            time.sleep(0.1)
        self.kill()
        raise RuntimeError(f"server did not answer /api/health within {self.start_timeout} s")

    def kill(self) -> None:
        """SIGKILL the server (and its workers: they share its process group)."""
        if self.proc is not None and self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGKILL)
        self._reap()

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGTERM)
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                os.killpg(self.proc.pid, signal.SIGKILL)
        self._reap()

    def _reap(self) -> None:
        if self.proc is not None:
            self.proc.wait(timeout=30)
        if self._log_fh is not None:
            self._log_fh.close()
            self._log_fh = None

    def __enter__(self) -> LiveServer:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()


class ThreadServer:
    """``with ThreadServer(app) as server:`` serves ``app`` at ``server.url`` from a thread."""

    def __init__(self, app: Any, *, start_timeout: float = 60.0) -> None:
        self.app = app
        self.start_timeout = start_timeout
        self.port = 0
        self._server: Any = None
        self._thread: threading.Thread | None = None

    @property
    def url(self) -> str:
        return f"http://{LOOPBACK}:{self.port}"

    def start(self) -> ThreadServer:
        import uvicorn

        sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        sock.bind((LOOPBACK, 0))
        self.port = int(sock.getsockname()[1])
        config = uvicorn.Config(self.app, log_level="warning", lifespan="on")
        self._server = uvicorn.Server(config)
        self._thread = threading.Thread(
            target=self._server.run, kwargs={"sockets": [sock]}, daemon=True
        )
        self._thread.start()
        deadline = time.monotonic() + self.start_timeout
        while not self._server.started:
            if not self._thread.is_alive():
                raise RuntimeError("the server thread ended on start (see the test's log)")
            if time.monotonic() > deadline:
                self.stop()
                raise RuntimeError(f"the server did not start within {self.start_timeout} s")
            time.sleep(0.01)
        return self  # the server owns the socket now and closes it when it stops

    def stop(self) -> None:
        if self._server is not None:
            self._server.should_exit = True
        if self._thread is not None:
            self._thread.join(timeout=30)
            if self._thread.is_alive():
                raise RuntimeError("the server thread did not stop within 30 s")
        self._thread = None

    def __enter__(self) -> ThreadServer:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()


class Client:
    """An httpx client logged in to a live server as ``username``; ``csrf`` is its token."""

    def __init__(self, base_url: str, username: str, password: str, timeout: float = 30.0) -> None:
        self.http = httpx.Client(base_url=base_url, timeout=timeout)
        resp = self.http.post("/login", data={"username": username, "password": password})
        if resp.status_code != 303:
            raise RuntimeError(f"login as {username} answered {resp.status_code}")
        me = self.http.get("/api/session").json()
        self.csrf: str = me["csrf_token"]
        self.user_id: int = me["user_id"]
        self.username = username

    def save(self, sentence_id: int, base: int, tree: str, **extra: Any) -> httpx.Response:
        return self.http.post(
            f"/api/bench/{sentence_id}/revisions",
            headers={"X-CSRF-Token": self.csrf},
            json={"base": base, "tree": tree, **extra},
        )

    def close(self) -> None:
        self.http.close()


def add_annotators(db: Session, prefix: str, count: int) -> list[User]:
    """``count`` new annotators ``prefix0``, ``prefix1``... with the test password."""
    from tests.app.conftest import PASSWORD_HASH

    users = [
        User(
            username=f"{prefix}{i}",
            display_name=f"{prefix.title()} {i}",
            role="annotator",
            password_hash=PASSWORD_HASH,
        )
        for i in range(count)
    ]
    db.add_all(users)
    db.commit()
    return users


def marked_tree(tokens: list[str], marker: str) -> str:
    """A flat tree of ``tokens`` whose first POS tag is ``marker``, so each save is traceable
    (the corpus must accept any tag: make it with empty label and tag sets)."""
    from tests.app.bench_helpers import flat_text

    return flat_text(tokens, [marker] + ["NN"] * (len(tokens) - 1))
