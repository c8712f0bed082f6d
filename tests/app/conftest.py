"""App fixtures: a fresh migrated database per test, a client, users of every role.

By default the database is SQLite under ``tmp_path`` (a copy of one file migrated once per
session). When ``TREEWRIGHT_TEST_DATABASE_URL`` names a PostgreSQL server (``.ci/run`` sets it
for the second pass), each pytest worker gets one database on that server, migrated once; every
test starts from it emptied (other connections ended, all tables truncated, ids restarted), which
is what a fresh database looks like and costs milliseconds instead of a CREATE/DROP DATABASE.
"""

from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import create_engine, text
from sqlalchemy.orm import Session

from app.main import create_app
from app.models import ROLE_ADJUDICATOR, ROLE_ADMIN, ROLE_ANNOTATOR, User
from app.security import hash_password
from app.settings import Settings

PG_URL = os.environ.get("TREEWRIGHT_TEST_DATABASE_URL", "")
PASSWORD = "test-pass-123"
PASSWORD_HASH = hash_password(PASSWORD)  # hashed once: argon2 is slow on purpose


def on_postgres() -> bool:
    return PG_URL.startswith("postgresql")


def sqlite_only() -> pytest.MarkDecorator:
    """Mark a test that checks SQLite behaviour; it skips on the PostgreSQL pass."""
    return pytest.mark.skipif(
        on_postgres(),
        reason="checks SQLite-specific behaviour; this "
        "run uses PostgreSQL (TREEWRIGHT_TEST_DATABASE_URL)",
    )


@pytest.fixture(scope="session")
def _migrated_sqlite(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One SQLite file migrated to head per test session; each test gets a copy."""
    from app.db import upgrade_to_head

    folder = tmp_path_factory.mktemp("template-db")
    upgrade_to_head(Settings(data_dir=folder, secret_key="x"))
    return folder / "treewright.db"


@pytest.fixture
def settings(tmp_path: Path, request: pytest.FixtureRequest) -> Iterator[Settings]:
    if not on_postgres():
        data = tmp_path / "data"
        data.mkdir()
        shutil.copyfile(request.getfixturevalue("_migrated_sqlite"), data / "treewright.db")
        yield Settings(
            data_dir=data,
            secret_key="test-secret",
            login_delay_seconds=0.05,
            training_in_process=True,
            parse_wait_seconds=300,
        )
        return
    url = request.getfixturevalue("_pg_worker_database")
    _empty_pg_database(url)
    yield Settings(
        data_dir=tmp_path / "data",
        database_url=url,
        secret_key="test-secret",
        login_delay_seconds=0.05,
        parse_wait_seconds=300,
        training_in_process=True,
    )


@pytest.fixture(scope="session")
def _pg_worker_database(request: pytest.FixtureRequest) -> Iterator[str]:
    """One migrated PostgreSQL database for this pytest worker, dropped at the end."""
    from app.db import upgrade_to_head

    worker = getattr(request.config, "workerinput", {}).get("workerid", "main")
    name = f"tw_test_{worker}_{uuid.uuid4().hex[:8]}"
    admin = create_engine(PG_URL, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    url = f"{PG_URL.rsplit('/', 1)[0]}/{name}"
    upgrade_to_head(Settings(database_url=url, secret_key="x"))
    yield url
    with admin.connect() as conn:
        conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    admin.dispose()


def _empty_pg_database(url: str) -> None:
    from app.models import Base

    tables = ", ".join(f'"{t.name}"' for t in Base.metadata.sorted_tables)
    engine = create_engine(url, isolation_level="AUTOCOMMIT")
    with engine.connect() as conn:
        # A server killed by a crash test, or an app engine a test left open, may still hold
        # a connection; end them so TRUNCATE's lock is not kept waiting.
        conn.execute(
            text(
                "SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                "WHERE datname = current_database() AND pid <> pg_backend_pid()"
            )
        )
        conn.execute(text(f"TRUNCATE {tables} RESTART IDENTITY CASCADE"))
    engine.dispose()


@pytest.fixture
def app(settings: Settings):  # type: ignore[no-untyped-def]
    application = create_app(settings)
    yield application
    application.state.engine.dispose()


@pytest.fixture
def db(app) -> Iterator[Session]:  # type: ignore[no-untyped-def]
    session: Session = app.state.sessionmaker()
    yield session
    session.close()


@dataclass
class People:
    admin: User
    adjudicator: User
    ann1: User
    ann2: User


@pytest.fixture
def people(db: Session) -> People:
    def mk(name: str, role: str) -> User:
        user = User(
            username=name, display_name=name.title(), role=role, password_hash=PASSWORD_HASH
        )
        db.add(user)
        return user

    p = People(
        admin=mk("admin", ROLE_ADMIN),
        adjudicator=mk("adj", ROLE_ADJUDICATOR),
        ann1=mk("ann1", ROLE_ANNOTATOR),
        ann2=mk("ann2", ROLE_ANNOTATOR),
    )
    db.commit()
    return p


class LoggedIn:
    """A TestClient logged in as one user; ``csrf`` is its session's CSRF token."""

    def __init__(self, app, username: str) -> None:  # type: ignore[no-untyped-def]
        self.client = TestClient(app)
        resp = self.client.post(
            "/login", data={"username": username, "password": PASSWORD}, follow_redirects=False
        )
        assert resp.status_code == 303, resp.text
        me = self.client.get("/api/session")
        assert me.status_code == 200, me.text
        self.csrf = me.json()["csrf_token"]
        self.user_id = me.json()["user_id"]

    def headers(self) -> dict[str, str]:
        return {"X-CSRF-Token": self.csrf}


@pytest.fixture
def login(app, people):  # type: ignore[no-untyped-def]
    """``login("ann1")`` gives a LoggedIn client for that user."""
    return lambda username: LoggedIn(app, username)
