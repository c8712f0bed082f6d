"""The web service's layers, read from the source (common practice, no source).

* The modules of ``app.services`` import each other without a cycle, counting imports inside
  functions too (an import moved into a function hides a cycle; it does not remove it).
* The CLI never commits: it calls the services' units of work.
* Route modules hold no queries and no transactions: they never import SQLAlchemy's query
  functions, never call a method of a database session (``db.get``, ``db.commit``...) and
  import from ``app.models`` only the vocabulary (enums and constants) and model classes, which
  they use as types. Reading and writing is the services' job (DEVELOPERS.md, "Architecture").
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SERVICES = ROOT / "app" / "services"
ROUTES = ROOT / "app" / "routes"


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imported_modules(path: Path, known: set[str]) -> set[str]:
    """Every module of ``known`` that ``path`` imports, at module level or in a function."""
    found: set[str] = set()
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        candidates: list[str] = []
        if isinstance(node, ast.Import):
            candidates = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            # "from app.services import agreement" imports the module app.services.agreement
            candidates = [node.module] + [f"{node.module}.{a.name}" for a in node.names]
        for name in candidates:
            if name in known:
                found.add(name)
    return found


def import_graph(folder: Path) -> dict[str, set[str]]:
    paths = sorted(folder.glob("*.py"))
    names = {_module_name(p) for p in paths}
    return {_module_name(p): _imported_modules(p, names) - {_module_name(p)} for p in paths}


def find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One import cycle of ``graph`` as a path that ends where it starts, or None."""
    state: dict[str, int] = {}  # 1: on the current path, 2: done
    path: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        path.append(node)
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                return path[path.index(nxt) :] + [nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        path.pop()
        state[node] = 2
        return None

    for start in sorted(graph):
        if start not in state:
            found = visit(start)
            if found:
                return found
    return None


def test_architecture_cycle_finder_sees_a_cycle_through_a_function_level_import(
    tmp_path: Path,
) -> None:
    # the checker itself: a cycle closed by an import inside a function is found
    pkg = tmp_path / "app" / "services"
    pkg.mkdir(parents=True)
    (pkg / "one.py").write_text("from app.services import two\n")
    (pkg / "two.py").write_text("def f():\n    from app.services.one import g\n")
    (pkg / "three.py").write_text("import app.services.two\n")
    names = {"app.services.one", "app.services.two", "app.services.three"}
    graph = {
        f"app.services.{p.stem}": _imported_modules(p, names) for p in sorted(pkg.glob("*.py"))
    }
    assert graph["app.services.three"] == {"app.services.two"}
    cycle = find_cycle(graph)
    assert cycle is not None and set(cycle) == {"app.services.one", "app.services.two"}
    del graph["app.services.two"]
    assert find_cycle(graph) is None


def test_architecture_services_import_each_other_without_a_cycle() -> None:
    graph = import_graph(SERVICES)
    assert len(graph) > 10  # every service module was read
    assert find_cycle(graph) is None, f"import cycle: {' -> '.join(find_cycle(graph) or [])}"


def test_architecture_gold_loop_runs_one_way() -> None:
    # submit -> agreement -> gold -> training -> suggestions, never back
    graph = import_graph(SERVICES)
    chain = ["annotation", "agreement", "gold", "training", "suggestions"]
    for earlier, later in zip(chain, chain[1:], strict=False):
        assert f"app.services.{later}" in graph[f"app.services.{earlier}"], (earlier, later)

    def reaches(a: str, b: str) -> bool:
        seen, todo = set(), [a]
        while todo:
            node = todo.pop()
            if node == b:
                return True
            if node not in seen:
                seen.add(node)
                todo.extend(graph.get(node, ()))
        return False

    for i, later in enumerate(chain):
        for earlier in chain[:i]:
            assert not reaches(f"app.services.{later}", f"app.services.{earlier}"), (
                f"{later} reaches back to {earlier}"
            )


#: SQLAlchemy names a route module may import: none of them builds or runs a query.
ROUTE_SQLALCHEMY_ALLOWED = {("sqlalchemy.orm", "Session"), ("sqlalchemy.exc", "SQLAlchemyError")}


def _route_offences(path: Path, root: Path = ROOT) -> list[str]:
    out = []
    rel = path.relative_to(root)
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    for node in ast.walk(tree):
        if (
            isinstance(node, ast.ImportFrom)
            and node.module
            and node.module.startswith("sqlalchemy")
        ):
            for alias in node.names:
                if (node.module, alias.name) not in ROUTE_SQLALCHEMY_ALLOWED:
                    out.append(f"{rel}:{node.lineno} imports {node.module}.{alias.name}")
        elif isinstance(node, ast.Import):
            out += [
                f"{rel}:{node.lineno} imports {a.name}"
                for a in node.names
                if a.name.startswith("sqlalchemy")
            ]
        elif isinstance(node, ast.ImportFrom) and node.module == "app.models":
            for alias in node.names:
                if not (alias.name[:1].isupper()):  # classes and CONSTANTS only
                    out.append(f"{rel}:{node.lineno} imports app.models.{alias.name}")
        elif (
            isinstance(node, ast.Call)
            and isinstance(node.func, ast.Attribute)
            and isinstance(node.func.value, ast.Name)
            and node.func.value.id == "db"
        ):
            out.append(f"{rel}:{node.lineno} calls db.{node.func.attr}()")
    return out


def test_architecture_routes_hold_no_queries_or_transactions() -> None:
    paths = sorted(ROUTES.glob("*.py"))
    assert len(paths) > 10
    offences = [o for p in paths for o in _route_offences(p)]
    assert not offences, "\n".join(offences)


def test_architecture_route_checker_catches_a_query(tmp_path: Path) -> None:
    bad = tmp_path / "bad_route.py"
    bad.write_text(
        "from sqlalchemy import select\nfrom app.models import utcnow\n"
        "def page(db):\n    db.commit()\n"
    )
    assert len(_route_offences(bad, tmp_path)) == 3


def test_architecture_cli_commands_never_commit() -> None:
    # the CLI calls units of work (see app/services/transactions.py); they commit
    tree = ast.parse((ROOT / "app" / "cli.py").read_text(encoding="utf-8"))
    commits = [
        node.lineno
        for node in ast.walk(tree)
        if isinstance(node, ast.Attribute) and node.attr in ("commit", "rollback")
    ]
    assert commits == [], f"app/cli.py commits or rolls back at lines {commits}"
