"""The Treewright app with a gate before every parse of its admission pool, for tests that must
hold the pool busy: the n-th parse to start (in this process) runs only once the file named by
``TREEWRIGHT_TEST_PARSE_GATE`` holds a number >= n, or is gone. A test writes the number
(atomically) to let parses through one by one. Start it with
``LiveServer(..., factory="tests.browser.gated_app:create_app")``.

The gate polls the file every 20 ms from the pool's own thread, so requests that do not parse
are never held.
"""

from __future__ import annotations

import os
import threading
import time
from collections.abc import Callable, Hashable
from pathlib import Path
from typing import Any

from fastapi import FastAPI

from app.main import create_app as plain_app
from app.services.admission import ParseAdmission

GATE_ENV = "TREEWRIGHT_TEST_PARSE_GATE"
_lock = threading.Lock()
_started = 0


def _open_for(gate: Path, number: int) -> bool:
    try:
        text = gate.read_text(encoding="ascii").strip()
    except FileNotFoundError:
        return True
    return text.isdigit() and int(text) >= number


def _gated_call(call: Callable[..., Any], gate: Path) -> Callable[..., Any]:
    def gated(self: ParseAdmission, key: Hashable, parse: Callable[[], Any]) -> Any:
        def after_the_gate() -> Any:
            global _started
            with _lock:
                _started += 1
                number = _started
            while not _open_for(gate, number):
                time.sleep(0.02)
            return parse()

        return call(self, key, after_the_gate)

    return gated


def create_app() -> FastAPI:
    gate = Path(os.environ[GATE_ENV])
    ParseAdmission._call = _gated_call(ParseAdmission._call, gate)  # type: ignore[method-assign]
    return plain_app()


def set_gate(gate: Path, value: int | None) -> None:
    """Let the first ``value`` parses through (None: all of them), atomically."""
    if value is None:
        gate.unlink(missing_ok=True)
        return
    tmp = gate.with_suffix(".tmp")
    tmp.write_text(str(value), encoding="ascii")
    os.replace(tmp, gate)
