"""Database engine, sessions and migration to head.

SQLite gets foreign keys, WAL journaling and a busy timeout on every connection; PostgreSQL
is reached through psycopg 3 (``postgresql+psycopg://``).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from alembic import command
from alembic.config import Config
from sqlalchemy import Engine, create_engine, event, text
from sqlalchemy.orm import Session, sessionmaker

from app.settings import ALEMBIC_INI, MIGRATIONS_DIR, Settings


def _sqlite_pragmas(dbapi_conn: Any, _record: Any) -> None:
    cur = dbapi_conn.cursor()
    cur.execute("PRAGMA foreign_keys=ON")
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute("PRAGMA synchronous=NORMAL")
    cur.execute("PRAGMA busy_timeout=15000")
    cur.close()


def make_engine(settings: Settings) -> Engine:
    url = settings.resolved_database_url
    if url.startswith("sqlite"):
        settings.ensure_data_dir()
        engine = create_engine(url, connect_args={"check_same_thread": False, "timeout": 15})
        event.listen(engine, "connect", _sqlite_pragmas)
        return engine
    try:
        return create_engine(url, pool_pre_ping=True, pool_size=10, max_overflow=20)
    except ModuleNotFoundError as exc:  # e.g. psycopg, the optional extra "postgres"
        raise RuntimeError(f"the database URL needs the driver {exc.name!r}, which is not "
                           "installed; for PostgreSQL install Treewright with its 'postgres' "
                           "extra (pip install 'treewright[postgres]')") from exc


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
