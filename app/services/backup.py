"""Backup and restore of the SQLite database, safe while the service runs.

:func:`backup_sqlite` copies the live database with SQLite's online backup API (Python's
``sqlite3.Connection.backup``), which gives a consistent snapshot even while other connections
write; the copy is written to a temporary file, checked with ``PRAGMA integrity_check`` and
only then renamed into place, so a backup file is either whole or absent.

:func:`restore_sqlite` checks the chosen backup (integrity, a Treewright schema), keeps a copy
of the current database first (nothing is ever lost by restoring), then copies the backup
into the database file with the same backup API, and brings the schema to head. Stop the
service during a restore: open sessions would otherwise see the data change under them.

PostgreSQL is backed up with its own tools (``pg_dump`` / ``pg_restore``); both functions
say so instead of trying.
"""

from __future__ import annotations

import os
import sqlite3
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from sqlalchemy.engine import make_url

from app.db import private_file, upgrade_to_head
from app.services.errors import BadInput, ServiceError
from app.settings import Settings

PG_HINT = (
    "this database is PostgreSQL: back it up with `pg_dump -Fc DBNAME > "
    "treewright.dump` and restore with `pg_restore -d DBNAME treewright.dump`"
)


class BackupError(ServiceError):
    status_code = 400


@dataclass
class BackupInfo:
    path: Path
    bytes: int
    tables: int


def database_path(settings: Settings) -> Path:
    """The SQLite file of ``settings``; a clear error for other databases."""
    if not settings.is_sqlite:
        raise BackupError(PG_HINT)
    url = make_url(settings.resolved_database_url)
    if not url.database or url.database == ":memory:":
        raise BackupError("an in-memory SQLite database has nothing to back up")
    return Path(url.database)


def default_backup_path(settings: Settings) -> Path:
    stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
    return settings.data_dir / "backups" / f"treewright-{stamp}.db"


def _check(path: Path) -> int:
    """Integrity of a SQLite file and the number of its tables; raises BackupError."""
    try:
        conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    except sqlite3.Error as err:
        raise BackupError(f"{path}: cannot open as SQLite: {err}") from None
    try:
        verdict = conn.execute("PRAGMA integrity_check").fetchone()[0]
        if verdict != "ok":
            raise BackupError(f"{path}: integrity check failed: {verdict}")
        names = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type='table'")}
    except sqlite3.DatabaseError as err:
        raise BackupError(f"{path}: not a SQLite database ({err})") from None
    finally:
        conn.close()
    if not {"alembic_version", "users", "corpora"} <= names:
        raise BackupError(
            f"{path}: not a Treewright database (tables users, corpora and "
            "alembic_version are missing)"
        )
    return len(names)


def _copy(source: Path, target: Path) -> None:
    src = sqlite3.connect(f"file:{source}?mode=ro", uri=True)
    dst = sqlite3.connect(private_file(target))
    try:
        src.execute("PRAGMA busy_timeout=15000")
        with dst:
            src.backup(dst, pages=1024)
    finally:
        dst.close()
        src.close()


def backup_sqlite(settings: Settings, target: Path | None = None) -> BackupInfo:
    """A consistent copy of the live database at ``target`` (default: DATA_DIR/backups/...)."""
    source = database_path(settings)
    if not source.exists():
        raise BackupError(f"there is no database at {source} yet")
    target = Path(target) if target else default_backup_path(settings)
    if target.exists():
        raise BadInput(f"{target} exists already; choose another file name")
    target.parent.mkdir(parents=True, exist_ok=True)
    partial = target.with_name(target.name + ".partial")
    partial.unlink(missing_ok=True)
    try:
        _copy(source, partial)
        # The copy stands alone: no -wal file beside it.
        conn = sqlite3.connect(partial)
        conn.execute("PRAGMA journal_mode=DELETE")
        conn.close()
        tables = _check(partial)
        os.replace(partial, target)
    finally:
        partial.unlink(missing_ok=True)
    os.chmod(target, 0o600)
    return BackupInfo(path=target, bytes=target.stat().st_size, tables=tables)


def restore_sqlite(settings: Settings, source: Path) -> tuple[BackupInfo | None, Path]:
    """Replace the database with the backup ``source``.

    Returns the safety copy of the database as it was (None when there was none) and the
    restored database path.
    """
    live = database_path(settings)
    source = Path(source)
    if not source.is_file():
        raise BadInput(f"no backup file at {source}")
    _check(source)
    safety = None
    if live.exists():
        stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
        safety = backup_sqlite(
            settings, settings.data_dir / "backups" / f"before-restore-{stamp}.db"
        )
    live.parent.mkdir(parents=True, exist_ok=True)
    src = sqlite3.connect(f"file:{source}?mode=ro", uri=True)
    dst = sqlite3.connect(private_file(live), timeout=15)
    try:
        with dst:
            src.backup(dst)
    finally:
        dst.close()
        src.close()
    upgrade_to_head(settings)
    return safety, live
