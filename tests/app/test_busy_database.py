"""SQLite's write lock held elsewhere: a save answers 503 with Retry-After (never 500) and
stores nothing; the database, its WAL and a backup being written are private (0600)."""

from __future__ import annotations

import sqlite3
import stat
from pathlib import Path

import pytest

from app.db import sqlite_file
from app.services import backup
from tests.app.bench_helpers import assign, flat_text, make_corpus
from tests.app.conftest import sqlite_only


@pytest.fixture
def settings(settings):  # type: ignore[no-untyped-def]
    settings.sqlite_busy_seconds = 0.3  # a short wait, so the test does not sit 15 s
    return settings


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


@sqlite_only()
def test_busy_database_save_answers_503_and_stores_nothing(login, db, people, settings) -> None:
    corpus, (sentence,) = make_corpus(db, ["the tide turned ."], labels=[], tags=[])
    assign(db, [sentence], people.ann1)
    me = login("ann1")
    tree = flat_text(sentence.tokens)
    holder = sqlite3.connect(sqlite_file(settings), timeout=5)
    holder.execute("BEGIN IMMEDIATE")  # another writer (a long import) holds the lock
    try:
        busy = me.client.post(
            f"/api/bench/{sentence.id}/revisions",
            headers=me.headers(),
            json={"base": 0, "tree": tree},
        )
    finally:
        holder.rollback()
        holder.close()
    assert busy.status_code == 503, busy.text
    assert busy.headers["retry-after"] == "1"
    assert busy.json()["kind"] == "busy" and "nothing was stored" in busy.json()["detail"]
    assert me.client.get(f"/api/bench/{sentence.id}").json()["annotation"]["head"] == 0
    again = me.client.post(
        f"/api/bench/{sentence.id}/revisions", headers=me.headers(), json={"base": 0, "tree": tree}
    )
    assert again.status_code == 201, again.text


@sqlite_only()
def test_busy_database_files_are_private(app, login, people, settings) -> None:
    login("ann1")  # a write, so the WAL exists
    path = sqlite_file(settings)
    assert path is not None
    assert _mode(path) == 0o600
    assert _mode(path.with_name(path.name + "-wal")) == 0o600


@sqlite_only()
def test_busy_database_existing_file_is_made_private(tmp_path) -> None:
    from app.db import private_file

    path = tmp_path / "old.db"
    path.write_bytes(b"")
    path.chmod(0o644)
    private_file(path)
    assert _mode(path) == 0o600


@sqlite_only()
def test_busy_database_backup_partial_copy_is_private(app, settings, tmp_path, monkeypatch) -> None:
    seen: dict[str, int] = {}
    check = backup._check

    def spy(path: Path) -> int:
        seen[path.name] = _mode(path)  # the partial copy, before it is renamed
        return check(path)

    monkeypatch.setattr(backup, "_check", spy)
    info = backup.backup_sqlite(settings, tmp_path / "copy.db")
    assert seen == {"copy.db.partial": 0o600}
    assert _mode(info.path) == 0o600
