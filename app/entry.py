"""The ``treewright`` command's entry point: check the import names, then run the CLI.

Treewright's import names are ``app`` and ``parser``. A different module named ``parser`` that
comes first on sys.path (a file in the working folder, a package installed beside Treewright)
would break every command with a confusing import error; this check says what happened instead.
It imports nothing of Treewright's own before the check.
"""

from __future__ import annotations

import importlib
import sys


def parser_problem() -> str | None:
    """Why the module ``parser`` on sys.path is not Treewright's, or None when it is."""
    try:
        found = importlib.import_module("parser")
    except ImportError as exc:
        return f"Treewright's parser library cannot be imported: {exc}. Reinstall Treewright."
    if getattr(found, "IS_TREEWRIGHT_PARSER", False):
        return None
    where = getattr(found, "__file__", None) or "an unknown place"
    return (
        f"the module 'parser' found at {where} is not Treewright's parser library: another "
        "module of that name shadows it. Treewright's import names are 'app' and 'parser'; "
        "install it as an application in a virtualenv of its own (or with pipx), and run it "
        "from a folder without a parser.py or parser/ of its own."
    )


def run() -> None:
    problem = parser_problem()
    if problem:
        print(f"Error: {problem}", file=sys.stderr)
        raise SystemExit(2)
    from app.cli import main

    main()
