"""Helpers for the kill -9 tests: invented import files and database checks after a crash."""

from __future__ import annotations

import random
import sqlite3

from sqlalchemy import create_engine, func, select, text
from sqlalchemy.orm import Session

from app.models import Corpus, Document, Sentence
from app.services.backup import database_path
from app.settings import Settings

_WORDS = (
    "the a ferry crew mate checked loaded painted hull rope deck engine winch gangway "
    "before after noon dawn quietly slowly harbour pier tide cargo ramp"
).split()


def sentence_file(count: int, seed: int, tag: str) -> bytes:
    """``count`` distinct invented sentences, one per line (UTF-8)."""
    rnd = random.Random(seed)
    lines = []
    for i in range(count):
        body = " ".join(rnd.choice(_WORDS) for _ in range(rnd.randint(5, 25)))
        lines.append(f"{body} {tag}{i} .")
    return ("\n".join(lines) + "\n").encode("utf-8")


def sqlite_problems(settings: Settings) -> list[str]:
    """What ``PRAGMA integrity_check`` and ``foreign_key_check`` report (empty when sound),
    read through a fresh connection as a restarted process would."""
    conn = sqlite3.connect(database_path(settings))
    try:
        rows = [r[0] for r in conn.execute("PRAGMA integrity_check")]
        problems = [] if rows == ["ok"] else rows
        problems += [f"foreign key: {r}" for r in conn.execute("PRAGMA foreign_key_check")]
        return problems
    finally:
        conn.close()


def import_state(db: Session, corpus_name: str, expected: int) -> str:
    """``"absent"`` or ``"whole"``; raises AssertionError for anything in between."""
    db.expire_all()
    corpus = db.scalar(select(Corpus).where(Corpus.name == corpus_name))
    if corpus is None:
        return "absent"
    docs = db.scalars(select(Document).where(Document.corpus_id == corpus.id)).all()
    stored = db.scalar(
        select(func.count()).select_from(Sentence).where(Sentence.corpus_id == corpus.id)
    )
    assert len(docs) == 1, f"corpus {corpus_name!r} has {len(docs)} documents"
    assert stored == expected, f"corpus {corpus_name!r} holds {stored} of {expected} sentences"
    positions = db.scalars(
        select(Sentence.position).where(Sentence.corpus_id == corpus.id).order_by(Sentence.position)
    ).all()
    assert list(positions) == list(range(expected)), "sentence positions have gaps"
    return "whole"


def write_in_progress(settings: Settings) -> bool:
    """Whether another connection holds an open write transaction on the database right now:
    on SQLite, ``BEGIN IMMEDIATE`` without waiting fails exactly then; on PostgreSQL, another
    backend of this database has a transaction id (it has written)."""
    if settings.is_sqlite:
        conn = sqlite3.connect(database_path(settings), timeout=0, isolation_level=None)
        try:
            conn.execute("BEGIN IMMEDIATE")
            conn.execute("ROLLBACK")
            return False
        except sqlite3.OperationalError as exc:
            if "locked" in str(exc) or "busy" in str(exc):
                return True
            raise
        finally:
            conn.close()
    engine = create_engine(settings.resolved_database_url)
    try:
        with engine.connect() as conn:
            writers = conn.execute(
                text(
                    "SELECT count(*) FROM pg_stat_activity WHERE datname = current_database() "
                    "AND backend_xid IS NOT NULL AND pid <> pg_backend_pid()"
                )
            ).scalar()
        return bool(writers)
    finally:
        engine.dispose()
