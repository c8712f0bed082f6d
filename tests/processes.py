"""Processes seen from /proc (Linux): for tests that kill a parent and check that what it
started ends too."""

from __future__ import annotations

from pathlib import Path

#: Whether this system has the /proc these helpers read.
HAS_PROC = Path("/proc/self/stat").exists()


def children(pid: int) -> list[int]:
    """Processes whose parent is ``pid``."""
    out = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            out.append(int(entry.name))
    return out


def alive(pid: int) -> bool:
    """Whether ``pid`` runs (a zombie does not)."""
    try:
        state = (Path("/proc") / str(pid) / "stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"
