"""How Treewright is installed: the top-level folders are found as package resources, the
command refuses a ``parser`` that is not ours (common practice, no source). .ci/run builds the
wheel, installs it in a fresh virtualenv outside the checkout and runs the demo from there."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_packaging_cli_refuses_a_parser_module_that_shadows_ours(tmp_path: Path) -> None:
    (tmp_path / "parser.py").write_text("VALUE = 1\n")  # someone else's module named parser
    env = {**os.environ, "PYTHONPATH": str(tmp_path)}
    done = subprocess.run(
        [sys.executable, "-c", "from app.entry import run; run()", "user", "list", "--help"],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode != 0
    assert "is not Treewright's parser library" in done.stderr
    assert str(tmp_path / "parser.py") in done.stderr


def test_packaging_cli_accepts_our_parser(tmp_path: Path) -> None:
    done = subprocess.run(
        [sys.executable, "-c", "from app.entry import run; run()", "user", "list", "--help"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr


def test_packaging_resources_are_found_in_the_checkout() -> None:
    from app.settings import ALEMBIC_INI, MIGRATIONS_DIR, STATIC_DIR, TEMPLATES_DIR

    assert (TEMPLATES_DIR / "base.html").is_file()
    assert (STATIC_DIR / "css" / "base.css").is_file()
    assert (MIGRATIONS_DIR / "env.py").is_file()
    assert ALEMBIC_INI.is_file()
