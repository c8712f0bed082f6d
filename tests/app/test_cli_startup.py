"""The command line starts without loading what a command does not use."""

from __future__ import annotations

import json
import subprocess
import sys

from app import cli
from app.models import ROLES

HEAVY = ("sqlalchemy", "numba", "nltk", "numpy", "parser.chart", "app.models", "alembic")


def _loaded_after(args: list[str]) -> dict[str, bool]:
    """Run ``treewright ARGS`` in a fresh interpreter; which heavy modules it loaded."""
    code = (
        "import json, sys\n"
        "from app.cli import main\n"
        "try:\n"
        f"    main({args!r})\n"
        "except SystemExit:\n"
        "    pass\n"
        f"print(json.dumps({{m: m in sys.modules for m in {HEAVY!r}}}))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    return dict(json.loads(out.stdout.strip().splitlines()[-1]))


def test_cli_export_help_loads_no_database_or_parser_code() -> None:
    loaded = _loaded_after(["export", "--help"])
    assert not any(loaded.values()), loaded


def test_cli_parser_command_loads_the_parser_when_it_runs() -> None:
    loaded = _loaded_after(["score", "--help"])
    assert loaded["nltk"] and not loaded["sqlalchemy"], loaded


def test_cli_roles_are_the_models_roles() -> None:
    assert cli.ROLES == ROLES


def test_cli_lists_every_command() -> None:
    names = cli.main.list_commands(None)  # type: ignore[arg-type]
    assert {"train", "parse", "score", "export", "import", "serve"} <= set(names)
