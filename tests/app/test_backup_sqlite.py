"""Backup of a live SQLite database (online backup API) and restore."""

from __future__ import annotations

import sqlite3
import threading

import pytest
from sqlalchemy import func, select

from app.models import Corpus, Event, Sentence
from app.services.backup import BackupError, backup_sqlite, restore_sqlite
from app.services.corpora import delete_corpus
from app.services.imports import import_bytes
from tests.app.conftest import sqlite_only

pytestmark = sqlite_only()


def _integrity(path) -> str:
    conn = sqlite3.connect(path)
    try:
        return conn.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        conn.close()


def test_backup_of_a_live_database_passes_integrity_check(app, db, settings, tmp_path) -> None:
    import_bytes(db, b"Before the backup .\n", source="a.txt", corpus_name="Live")
    stop = threading.Event()
    written = []

    def writer() -> None:
        session = app.state.sessionmaker()
        n = 0
        while not stop.is_set():
            session.add(Event(kind="burst", detail={"n": n}))
            session.commit()
            written.append(n)
            n += 1
        session.close()

    thread = threading.Thread(target=writer)
    thread.start()
    try:
        while len(written) < 20:  # the writer is really going before the copy starts
            stop.wait(0.01)
        infos = [backup_sqlite(settings, tmp_path / f"copy{i}.db") for i in range(3)]
    finally:
        stop.set()
        thread.join()
    for info in infos:
        assert _integrity(info.path) == "ok"
        conn = sqlite3.connect(info.path)
        assert conn.execute("SELECT count(*) FROM sentences").fetchone()[0] == 1
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "delete"
        conn.close()
        assert (info.path.stat().st_mode & 0o777) == 0o600
    assert not list(tmp_path.glob("*.partial"))


def test_backup_default_path_and_refuses_to_overwrite(db, settings) -> None:
    info = backup_sqlite(settings)
    assert info.path.parent == settings.data_dir / "backups"
    with pytest.raises(Exception, match="exists already"):
        backup_sqlite(settings, info.path)


def test_restore_brings_the_backup_back(app, db, settings, tmp_path) -> None:
    import_bytes(db, b"Keep me .\nAnd me .\n", source="a.txt", corpus_name="Precious")
    info = backup_sqlite(settings, tmp_path / "good.db")
    corpus_id = db.scalar(select(Corpus.id))
    delete_corpus(db, corpus_id, "Precious")
    db.commit()
    assert db.scalar(select(func.count()).select_from(Sentence)) == 0
    db.close()
    app.state.engine.dispose()  # as when the service is stopped for a restore

    safety, live = restore_sqlite(settings, info.path)
    assert _integrity(live) == "ok"
    conn = sqlite3.connect(live)
    assert conn.execute("SELECT name FROM corpora").fetchall() == [("Precious",)]
    assert conn.execute("SELECT count(*) FROM sentences").fetchone()[0] == 2
    conn.close()
    # the database as it was before the restore is kept too
    assert safety is not None and _integrity(safety.path) == "ok"
    conn = sqlite3.connect(safety.path)
    assert conn.execute("SELECT count(*) FROM corpora").fetchone()[0] == 0
    conn.close()


def test_restore_refuses_a_file_that_is_not_a_treewright_database(settings, db, tmp_path) -> None:
    junk = tmp_path / "junk.db"
    junk.write_bytes(b"this is not sqlite at all" * 100)
    with pytest.raises(BackupError, match="not a SQLite database"):
        restore_sqlite(settings, junk)
    other = tmp_path / "other.db"
    conn = sqlite3.connect(other)
    conn.execute("CREATE TABLE t (x)")
    conn.close()
    with pytest.raises(BackupError, match="not a Treewright database"):
        restore_sqlite(settings, other)


def test_backup_says_to_use_pg_dump_on_postgresql(tmp_path) -> None:
    from app.settings import Settings

    pg = Settings(data_dir=tmp_path, database_url="postgresql+psycopg://u@h/db")
    with pytest.raises(BackupError, match="pg_dump"):
        backup_sqlite(pg)
