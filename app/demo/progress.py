"""Progress of the demo's first grammar, told in the terminal that runs ``treewright demo``.

Training the first grammar on the demo's gold takes a minute or more on a small machine
(:data:`ESTIMATE` says how long, as measured). ``treewright demo`` queues the job and serves at
once: the service's training runner takes the queued job in a process of its own, so pages are
served meanwhile. :func:`watch_in_background` reads the job's row every few seconds and prints a
line when its phase or its progress (in steps of :data:`STEP`) changes, and one when it ends.
With ``--no-serve`` :func:`train_with_progress` trains in the foreground with the same lines.

Cost: one primary-key read of the version row per ``interval``; nothing else.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass

from sqlalchemy.orm import Session, sessionmaker

from app.db import make_engine, make_sessionmaker
from app.models import GV_QUEUED, GV_TRAINING
from app.services.training import claim, get_version, run_version
from app.settings import Settings

#: How long the first grammar takes, as measured with ``treewright demo --no-serve`` on the
#: 75 demo gold trees (2 cores; see DEVELOPERS.md for the figures).
ESTIMATE = "about 1 to 3 minutes, depending on how busy the machine is"
#: Progress is reported in steps of this fraction.
STEP = 0.1


@dataclass(frozen=True)
class Snapshot:
    number: int
    status: str
    progress: float
    message: str
    heldout_f1: float | None

    @property
    def running(self) -> bool:
        return self.status in (GV_QUEUED, GV_TRAINING)

    def line(self) -> str:
        if self.running:
            return f"first grammar: {self.status} {self.progress:.0%}" + (
                f" ({self.message})" if self.message else ""
            )
        score = f", held-out F1 {self.heldout_f1:.3f}" if self.heldout_f1 is not None else ""
        return f"grammar version {self.number}: {self.status}{score}" + (
            "; the Bench offers suggestions now"
            if self.status == "ready"
            else f" ({self.message})"
            if self.message
            else ""
        )


def snapshot(factory: sessionmaker[Session], version_id: int) -> Snapshot:
    with factory() as db:
        v = get_version(db, version_id)
        return Snapshot(
            v.number, str(v.status), float(v.progress or 0.0), v.message or "", v.heldout_f1
        )


def watch(
    factory: sessionmaker[Session],
    version_id: int,
    echo: Callable[[str], None],
    *,
    interval: float = 2.0,
    stop: threading.Event | None = None,
) -> Snapshot:
    """Echo the job's progress until it ends (or ``stop`` is set); return its last state."""
    stop = stop or threading.Event()
    told: tuple[str, int] | None = None
    while True:
        now = snapshot(factory, version_id)
        key = (now.status, int(now.progress / STEP))
        if key != told:
            echo(now.line())
            told = key
        if not now.running or stop.wait(interval):
            return now


def watch_in_background(
    settings: Settings, version_id: int, echo: Callable[[str], None]
) -> threading.Thread:
    """Start :func:`watch` in a daemon thread with an engine of its own."""

    def run() -> None:
        engine = make_engine(settings)
        try:
            watch(make_sessionmaker(engine), version_id, echo)
        finally:
            engine.dispose()

    thread = threading.Thread(target=run, name="demo-progress", daemon=True)
    thread.start()
    return thread


def train_with_progress(
    settings: Settings, version_id: int, echo: Callable[[str], None]
) -> Snapshot:
    """Train the queued job ``version_id`` in this thread, telling its progress meanwhile."""
    engine = make_engine(settings)
    factory = make_sessionmaker(engine)
    # the watcher tells the end too: it sees the finished row on its next read
    watcher = threading.Thread(
        target=watch, args=(factory, version_id, echo), kwargs={"interval": 1.0}, daemon=True
    )
    try:
        watcher.start()
        if claim(factory, version_id) is not None:
            run_version(factory, version_id)
        watcher.join(timeout=30)
        return snapshot(factory, version_id)
    finally:
        engine.dispose()
