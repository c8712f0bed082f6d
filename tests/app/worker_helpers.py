"""Start ``treewright worker`` processes for the queue's test and its benchmark."""

from __future__ import annotations

import os
import subprocess
import sys
from typing import Any

from app.settings import PROJECT_ROOT


def start_worker(
    url: str, data_dir: str, stalled: float, name: str, **popen: Any
) -> subprocess.Popen[Any]:
    """A ``treewright worker`` on the database ``url``, taking a worker silent ``stalled``
    seconds for dead; ``popen`` goes to subprocess.Popen (output handling)."""
    env = {
        **os.environ,
        "TREEWRIGHT_DATABASE_URL": url,
        "TREEWRIGHT_DATA_DIR": data_dir,
        "TREEWRIGHT_WORKER_STALLED_SECONDS": str(stalled),
    }
    return subprocess.Popen(
        [sys.executable, "-c", "from app.entry import run; run()", "worker", "--name", name],
        cwd=PROJECT_ROOT,
        env=env,
        **popen,
    )
