"""Where the shared open data lives, and how tests that need it skip or fail.

The GUM trees (Zeldes 2017, CC BY) sit outside the repository at ``../shared/data/gum-trees``
relative to the project root. A test that needs them calls :func:`gum_dir`; when the folder is
absent it skips with a reason, unless ``TREEWRIGHT_REQUIRE_SHARED=1`` (set by ``.ci/run``), in
which case it fails.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

PROJECT_ROOT = Path(__file__).resolve().parent.parent
GUM_DIR = PROJECT_ROOT.parent / "shared" / "data" / "gum-trees"


def gum_dir() -> Path:
    """Return the GUM tree folder, or skip (or fail in CI) when it is missing."""
    if GUM_DIR.is_dir() and any(GUM_DIR.glob("*.ptb")):
        return GUM_DIR
    reason = (
        f"shared GUM trees not found at {GUM_DIR}; they live beside the project in "
        "../shared/data/gum-trees"
    )
    if os.environ.get("TREEWRIGHT_REQUIRE_SHARED") == "1":
        pytest.fail(reason + " and TREEWRIGHT_REQUIRE_SHARED=1 makes that an error")
    pytest.skip(reason)


def gum_files() -> list[Path]:
    """All GUM files, sorted by name (the order the train/test split uses)."""
    return sorted(gum_dir().glob("*.ptb"))
