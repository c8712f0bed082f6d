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
from collections.abc import Sequence
from typing import Any

from sqlalchemy import Table, or_, select
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from app.models import EffortShare, KeptSums

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
    postgres = db.get_bind().engine.dialect.name == "postgresql"
    insert = pg_insert(table) if postgres else sqlite_insert(table)
    new = insert.values(**values)
    statement = new.on_conflict_do_update(
        index_elements=[table.c.corpus_id, table.c.kind],
        set_={k: new.excluded[k] for k in ("changes", "seen", "last_id", "sums")},
        where=or_(
            table.c.changes < new.excluded.changes,
            (table.c.changes == new.excluded.changes) & (table.c.seen < new.excluded.seen),
        ),
    ).returning(table.c.corpus_id)  # a row back when this one was written
    return _apart(db, [(statement, None)], kind, corpus_id) > 0


def store_shares(db: Session, shares: dict[int, tuple[str, Any]]) -> bool:
    """Store effort shares (annotation id: (fingerprint, share)), replacing older ones, in a
    short transaction of its own like :func:`store`; False when they could not be."""
    if not shares:
        return True
    table = EffortShare.__table__
    assert isinstance(table, Table)
    postgres = db.get_bind().engine.dialect.name == "postgresql"
    insert = pg_insert(table) if postgres else sqlite_insert(table)
    statement = insert.on_conflict_do_update(
        index_elements=[table.c.annotation_id],
        set_={"fingerprint": insert.excluded.fingerprint, "share": insert.excluded.share},
    )
    rows = [
        {"annotation_id": aid, "fingerprint": fp, "share": share}
        for aid, (fp, share) in sorted(shares.items())
    ]
    chunks = [(statement, rows[at : at + 500]) for at in range(0, len(rows), 500)]
    return _apart(db, chunks, "effort shares", None) >= 0


def _apart(
    db: Session,
    statements: Sequence[tuple[Any, list[dict[str, Any]] | None]],
    what: str,
    corpus: Any,
) -> int:
    """Run ``statements`` (with their rows, for many at once) in one short transaction on a
    connection of its own that never waits long for a lock (see the module doc); the rows
    the last one wrote (one statement: the rows it returned), or -1 when it gave up."""
    engine = db.get_bind().engine
    postgres = engine.dialect.name == "postgresql"
    written = 0
    try:
        with engine.connect() as conn:
            was = None
            if postgres:
                conn.exec_driver_sql(f"SET LOCAL lock_timeout = '{WAIT_MS}ms'")
            else:
                was = conn.exec_driver_sql("PRAGMA busy_timeout").scalar()
                conn.exec_driver_sql(f"PRAGMA busy_timeout = {WAIT_MS}")
            try:
                for statement, rows in statements:
                    if rows is None:  # one row, returned when written
                        written = len(conn.execute(statement).all())
                    else:
                        conn.execute(statement, rows)
                        written = len(rows)
                conn.commit()
            finally:
                if not postgres:
                    conn.rollback()
                    conn.exec_driver_sql(f"PRAGMA busy_timeout = {int(was or 0)}")
                    conn.commit()
    except DBAPIError as exc:  # a lock held elsewhere, or the rows removed meanwhile
        log.info("kept %s (corpus %s) not stored: %s", what, corpus, exc.orig)
        return -1
    return int(written)
