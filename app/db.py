"""Database engine, sessions and migration to head.

SQLite gets foreign keys, WAL journaling and a busy timeout (``sqlite_busy_seconds``) on
every connection; its file is created 0600 (and made 0600 on every start), so the database and
its WAL are readable by the service's account only. PostgreSQL is reached through psycopg 3
(``postgresql+psycopg://``).
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from alembic import command
from alembic.config import Config
from sqlalchemy import Engine, create_engine, event, text
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker

from app.settings import ALEMBIC_INI, MIGRATIONS_DIR, Settings


def private_file(path: Path) -> Path:
    """Create ``path`` empty with mode 0600 if it does not exist (never readable by others,
    not even for a moment), and make an existing one 0600 with its SQLite ``-wal`` and
    ``-shm`` companions. SQLite creates those companions with the database file's mode, so a
    private database keeps them private too."""
    try:
        os.close(os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600))
    except FileExistsError:
        for companion in (
            path,
            path.with_name(path.name + "-wal"),
            path.with_name(path.name + "-shm"),
        ):
            if companion.exists():
                os.chmod(companion, 0o600)
    return path


def sqlite_file(settings: Settings) -> Path | None:
    """The SQLite database file of ``settings``, if it names a file database."""
    url = make_url(settings.resolved_database_url)
    if url.get_backend_name() != "sqlite" or not url.database or url.database == ":memory:":
        return None
    return Path(url.database)


def _sqlite_pragmas(busy_ms: int) -> Callable[[Any, Any], None]:
    def on_connect(dbapi_conn: Any, _record: Any) -> None:
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA foreign_keys=ON")
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute("PRAGMA synchronous=NORMAL")
        cur.execute(f"PRAGMA busy_timeout={busy_ms}")
        cur.close()

    return on_connect


def make_engine(settings: Settings) -> Engine:
    url = settings.resolved_database_url
    if url.startswith("sqlite"):
        settings.ensure_data_dir()
        path = sqlite_file(settings)
        if path is not None:
            private_file(path)
        busy = settings.sqlite_busy_seconds
        engine = create_engine(url, connect_args={"check_same_thread": False, "timeout": busy})
        event.listen(engine, "connect", _sqlite_pragmas(int(busy * 1000)))
        return engine
    try:
        return create_engine(url, pool_pre_ping=True, pool_size=10, max_overflow=20)
    except ModuleNotFoundError as exc:  # e.g. psycopg, the optional extra "postgres"
        raise RuntimeError(
            f"the database URL needs the driver {exc.name!r}, which is not "
            "installed; for PostgreSQL install Treewright with its 'postgres' "
            "extra (pip install 'treewright[postgres]')"
        ) from exc


def alembic_config(settings: Settings) -> Config:
    cfg = Config(str(ALEMBIC_INI))
    cfg.set_main_option("script_location", str(MIGRATIONS_DIR))
    cfg.set_main_option("sqlalchemy.url", settings.resolved_database_url.replace("%", "%%"))
    return cfg


def upgrade_to_head(settings: Settings) -> None:
    """Bring the database to the newest migration (called on every start), then make sure
    the triggers that keep the sentence counts exist (:mod:`app.counts`)."""
    from app.counts import ensure_triggers

    if settings.is_sqlite:
        settings.ensure_data_dir()
        path = sqlite_file(settings)
        if path is not None:
            private_file(path)
    command.upgrade(alembic_config(settings), "head")
    engine = make_engine(settings)
    try:
        ensure_triggers(engine)
    finally:
        engine.dispose()


def make_sessionmaker(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(bind=engine, expire_on_commit=False)


@contextmanager
def session_scope(factory: sessionmaker[Session]) -> Iterator[Session]:
    """A transaction: commit on success, roll back on any exception."""
    session = factory()
    try:
        yield session
        session.commit()
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()


def schema_revision(db: Session) -> str | None:
    """The Alembic revision the database is at."""
    revision = db.execute(text("SELECT version_num FROM alembic_version")).scalar()
    return None if revision is None else str(revision)


def dialect_name(db: Session) -> str:
    """``sqlite`` or ``postgresql``."""
    return db.get_bind().dialect.name
