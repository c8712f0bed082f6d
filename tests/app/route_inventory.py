"""Every (method, path) the app answers, found by walking the app's routes.

FastAPI (from 0.16x) keeps included routers as nested route groups in ``app.routes``; its
``iter_route_contexts`` flattens them. Older versions list the routes directly. Both are
handled, so the permission and CSRF tests see a new route as soon as it is added.
"""

from __future__ import annotations

from typing import Any

from fastapi.routing import APIRoute
from starlette.routing import Mount, Route


def _flat(routes: list[Any]) -> list[tuple[Any, str]]:
    try:
        from fastapi.routing import iter_route_contexts
    except ImportError:  # older FastAPI: app.routes is already flat
        return [(r, r.path) for r in routes]
    return [(ctx.original_route, ctx.path) for ctx in iter_route_contexts(routes)]


def app_routes(application: Any) -> list[tuple[str, str, Any]]:
    """(method, path, route) for every HTTP route; HEAD is left out (it mirrors GET), mounts
    (static files) too."""
    out: list[tuple[str, str, Any]] = []
    for route, path in _flat(list(application.routes)):
        if isinstance(route, Mount) or not isinstance(route, APIRoute | Route):
            continue
        for method in sorted((route.methods or set()) - {"HEAD"}):
            out.append((method, path, route))
    return out
