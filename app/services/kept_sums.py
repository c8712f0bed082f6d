"""Figures' sums kept in the database (``kept_sums``), so a new process starts from them.

What it does
    :func:`load` reads a corpus's stored sums of one kind (``agreement``, ``effort``);
    :func:`store` writes sums a view made, in a short transaction of its own, only when they
    are newer than the stored ones: made at a higher change mark, or at the same mark over
    more records (``seen``). Two views storing at once: the database keeps the newer
    (``INSERT ... ON CONFLICT DO UPDATE ... WHERE``, one statement), whichever commits first.

Why a transaction of its own
    The views that store are reads (GET requests, the command line): their session never
    commits. The write uses another connection of the engine and never waits long for a
    lock: on SQLite with a busy timeout of ``WAIT_MS`` (a session of the same process that
    holds the write lock, e.g. a test's uncommitted rows, makes it give up), on PostgreSQL
    with a lock timeout of the same length. Sums that could not be stored are a cache miss
    for the next process (it sums them again), never a wrong figure.

Cost: one primary-key read; one upsert of a row the size of the sums (pairs, labels, days).
"""

from __future__ import annotations

import logging
from typing import Any

from sqlalchemy import Table, or_, select
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from app.models import KeptSums

log = logging.getLogger(__name__)

#: The longest a view waits for a lock to store its sums (milliseconds).
WAIT_MS = 200


def load(db: Session, corpus_id: int, kind: str) -> KeptSums | None:
    """The stored sums of ``kind`` for the corpus (a detached copy of the row), or None."""
    row = db.execute(
        select(
            KeptSums.changes, KeptSums.seen, KeptSums.last_id, KeptSums.sums, KeptSums.kind
        ).where(KeptSums.corpus_id == corpus_id, KeptSums.kind == kind)
    ).one_or_none()
    if row is None:
        return None
    return KeptSums(
        corpus_id=corpus_id,
        kind=kind,
        changes=int(row.changes),
        seen=int(row.seen),
        last_id=int(row.last_id),
        sums=row.sums,
    )


def store(
    db: Session,
    corpus_id: int,
    kind: str,
    changes: int,
    seen: int,
    last_id: int,
    sums: dict[str, Any],
) -> bool:
    """Store the sums unless the stored ones are as new; True when this row was written.
    Commits its own short transaction (see the module doc); never raises for a lock."""
    engine = db.get_bind().engine
    table = KeptSums.__table__
    assert isinstance(table, Table)
    values = {
        "corpus_id": corpus_id,
        "kind": kind,
        "changes": changes,
        "seen": seen,
        "last_id": last_id,
        "sums": sums,
    }
    postgres = engine.dialect.name == "postgresql"
    insert = pg_insert(table) if postgres else sqlite_insert(table)
    statement = insert.values(**values)
    statement = statement.on_conflict_do_update(
        index_elements=[table.c.corpus_id, table.c.kind],
        set_={k: statement.excluded[k] for k in ("changes", "seen", "last_id", "sums")},
        where=or_(
            table.c.changes < statement.excluded.changes,
            (table.c.changes == statement.excluded.changes)
            & (table.c.seen < statement.excluded.seen),
        ),
    )
    try:
        with engine.connect() as conn:
            if postgres:
                conn.exec_driver_sql(f"SET LOCAL lock_timeout = '{WAIT_MS}ms'")
                written = conn.execute(statement).rowcount
                conn.commit()
            else:
                was = conn.exec_driver_sql("PRAGMA busy_timeout").scalar()
                conn.exec_driver_sql(f"PRAGMA busy_timeout = {WAIT_MS}")
                try:
                    written = conn.execute(statement).rowcount
                    conn.commit()
                finally:
                    conn.rollback()
                    conn.exec_driver_sql(f"PRAGMA busy_timeout = {int(was or 0)}")
                    conn.commit()
    except DBAPIError as exc:  # a lock held elsewhere, or the corpus removed meanwhile
        log.info("kept %s sums of corpus %s not stored: %s", kind, corpus_id, exc.orig)
        return False
    return bool(written)
