"""The parser library stays independent of the web service (common practice, no source)."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_layering_parser_sources_never_import_app_or_web_stack() -> None:
    forbidden = {"app", "fastapi", "sqlalchemy", "starlette", "alembic", "jinja2"}
    offenders = []
    for path in sorted((ROOT / "parser").rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for node in ast.walk(tree):
            names: list[str] = []
            if isinstance(node, ast.Import):
                names = [alias.name for alias in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                names = [node.module]
            for name in names:
                if name.split(".")[0] in forbidden:
                    offenders.append(f"{path.relative_to(ROOT)}:{node.lineno} imports {name}")
    assert not offenders, offenders


def test_layering_importing_parser_loads_no_web_modules() -> None:
    code = (
        "import importlib, pkgutil, sys\n"
        "import parser\n"
        "for m in pkgutil.iter_modules(parser.__path__):\n"
        "    importlib.import_module('parser.' + m.name)\n"
        "bad = sorted(n for n in sys.modules if n.split('.')[0] in "
        "{'app', 'fastapi', 'sqlalchemy', 'starlette'})\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == "", f"parser pulled in web modules: {out.stdout}"
