"""Owners of background rows (a grammar version in training, a findings run): the process and
host that run one and a heartbeat, so that another process can tell a live job from one whose
process died and take it over exactly once.

* :func:`owned_here` the column values that make this process the owner now;
* :func:`owner_gone` whether a row's owner stopped: no heartbeat for STALE_AFTER seconds, or
  (same host) its process has ended; a row with no owner recorded counts as abandoned;
* :func:`owner_seen` the compare-and-set conditions of a take-over (the owner and heartbeat
  that were read), so of two processes that find the same abandoned row only one takes it;
* :class:`Heartbeat` a thread that writes ``heartbeat_at`` every HEARTBEAT_SECONDS while the
  row keeps its running status.

The rows need the columns ``owner_host``, ``owner_pid`` and ``heartbeat_at``. Cost: one UPDATE
per beat; limits: clocks of the hosts sharing a database must agree within STALE_AFTER.
"""

from __future__ import annotations

import logging
import os
import socket
import threading
from datetime import datetime
from typing import Any

from sqlalchemy import update
from sqlalchemy.orm import Session, sessionmaker

from app.models import utcnow

log = logging.getLogger(__name__)

HOST = socket.gethostname()[:255]
#: Seconds between two heartbeats of a running job.
HEARTBEAT_SECONDS = 10.0
#: A job whose heartbeat is older than this (seconds) has lost its owner.
STALE_AFTER = 6 * HEARTBEAT_SECONDS


def process_alive(pid: int) -> bool:
    """Whether a process with this id runs on this host (signal 0 checks without sending)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # it exists, under another user
        return True
    return True


def owned_here() -> dict[str, Any]:
    """The values that make this process the owner of a row whose job starts now."""
    return {"owner_host": HOST, "owner_pid": os.getpid(), "heartbeat_at": utcnow()}


def owned_by_me(row: Any) -> bool:
    return bool(row.owner_host == HOST and row.owner_pid == os.getpid())


def owner_gone(row: Any, now: datetime) -> bool:
    """Whether the process that owns ``row`` no longer runs its job (see the module)."""
    beat = row.heartbeat_at
    if row.owner_pid is None or beat is None:
        return True
    if (now - beat).total_seconds() > STALE_AFTER:
        return True
    return bool(row.owner_host == HOST and not process_alive(row.owner_pid))


def _same(column: Any, value: Any) -> Any:
    """``column = value``, or ``column IS NULL`` for None (compare-and-set conditions)."""
    return column.is_(None) if value is None else column == value


def owner_seen(model: Any, row: Any, status: str) -> tuple[Any, ...]:
    """The conditions that the row still has ``status`` and the owner and heartbeat read."""
    return (
        model.id == row.id,
        model.status == status,
        _same(model.owner_host, row.owner_host),
        _same(model.owner_pid, row.owner_pid),
        _same(model.heartbeat_at, row.heartbeat_at),
    )


class Heartbeat:
    """While a job runs, a thread of its process writes ``heartbeat_at`` of its row every
    ``every`` seconds as long as the row has ``status``."""

    def __init__(
        self,
        factory: sessionmaker[Session],
        model: Any,
        row_id: int,
        status: str,
        every: float = HEARTBEAT_SECONDS,
    ) -> None:
        self.factory = factory
        self.model = model
        self.row_id = row_id
        self.status = status
        self.every = every
        self._stop = threading.Event()
        self._thread = threading.Thread(
            target=self._beat, daemon=True, name=f"treewright-heartbeat-{row_id}"
        )

    def _beat(self) -> None:
        while not self._stop.wait(self.every):
            try:
                with self.factory() as db:
                    db.execute(
                        update(self.model)
                        .where(self.model.id == self.row_id, self.model.status == self.status)
                        .values(heartbeat_at=utcnow())
                    )
                    db.commit()
            except Exception:  # noqa: BLE001 - a missed beat is retried at the next one
                log.warning("heartbeat of %s %s failed", self.model.__name__, self.row_id)

    def __enter__(self) -> Heartbeat:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join(timeout=self.every + 5)
