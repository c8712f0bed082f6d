"""Error answers shared by every JSON API route: their OpenAPI documentation, and the answer
for a value too large for the database.

Each route module documents the errors its own service raises. The ones that come from the
common layers are added to the OpenAPI document here, so no route forgets them:

* 401 and 403 on routes behind ``ApiUser``/``ApiAdjudicator``/``ApiAdmin`` (no login, role
  below, missing CSRF token);
* 400 (a body that cannot be decoded) and 413 (larger than the configured limit) on routes
  that take a body;
* 404 on routes with a ``*_id`` parameter (the services answer NotFound for unknown ids);
* 422 (a parameter or body that does not fit) on every route with parameters or a body.

A status the route module documents itself keeps its own description and model.

*Quiet refusals.* The pages expect some refusals as part of their work: a stale save (409, the
conflict panel), a tree that does not fit yet while the adjudicator types (422), a label to
confirm (422). A browser logs every 4xx answer to a script's request as a failed resource in
its console, where it reads as a fault. So a page's request says ``X-Treewright-Quiet-Refusal:
1`` and then gets such an expected refusal (409 or 422 from a service) as 200 with the real
status in ``X-Treewright-Status`` and the same body; the pages' ``api()`` helpers read that
header back. Every other client gets the plain status, and the OpenAPI document describes
those.
Cost: one walk over the routes' dependency trees at start-up, one pass over the document when
it is first built.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from fastapi import APIRouter, FastAPI, Request
from fastapi.dependencies.models import Dependant
from fastapi.responses import JSONResponse
from fastapi.routing import APIRoute

from app.schemas.common import ErrorPublic

AUTH_DEPENDENCY_MARK = "treewright_auth"
SHARED_ERROR_SCHEMA = "SharedErrorPublic"
#: The largest integer SQLite stores, and the largest in a PostgreSQL ``integer`` column.
MAX_DB_INT = 2**63 - 1
MAX_PG_INT = 2**31 - 1

_DOCS: dict[int, str] = {
    400: "the body could not be decoded",
    401: "login required",
    403: "role too low, or the CSRF token is missing or wrong",
    404: "no such object (or not yours to see)",
    413: "the body is larger than the configured limit",
    422: "a parameter or the body does not fit",
}


QUIET_REQUEST_HEADER = "X-Treewright-Quiet-Refusal"
STATUS_HEADER = "X-Treewright-Status"
#: Refusals a page expects in its normal work (see the module docstring).
QUIET_STATUSES = frozenset({409, 422})


def refusal_answer(
    request: Request, body: dict[str, Any], status_code: int, headers: dict[str, str] | None = None
) -> JSONResponse:
    """A service's refusal as JSON: with its status, or quietly (200 and the status in a
    header) when a page asked for that and the refusal is one it expects."""
    if status_code in QUIET_STATUSES and request.headers.get(QUIET_REQUEST_HEADER) == "1":
        return JSONResponse(
            body, status_code=200, headers={**(headers or {}), STATUS_HEADER: str(status_code)}
        )
    return JSONResponse(body, status_code=status_code, headers=headers)


def _walk(dependant: Dependant) -> list[Dependant]:
    out = [dependant]
    for sub in dependant.dependencies:
        out.extend(_walk(sub))
    return out


def shared_errors(route: APIRoute) -> set[int]:
    """The status codes the shared layers can answer for ``route``."""
    nodes = _walk(route.dependant)
    codes: set[int] = set()
    if any(getattr(n.call, AUTH_DEPENDENCY_MARK, False) for n in nodes):
        codes |= {401, 403}
    if route.body_field is not None:
        codes |= {400, 413, 422}
    params = [p for n in nodes for p in (*n.path_params, *n.query_params)]
    if params:
        codes.add(422)
    if any(p.name.endswith("_id") for p in params):
        codes.add(404)
    return codes


class SharedErrorDocs:
    """Collects the shared codes of each router's API routes, then patches the document."""

    def __init__(self) -> None:
        self.codes: dict[tuple[str, str], set[int]] = {}

    def collect(self, router: APIRouter) -> None:
        for route in router.routes:
            if isinstance(route, APIRoute) and route.path.startswith("/api/"):
                for method in route.methods or ():
                    self.codes[(method.lower(), route.path)] = shared_errors(route)

    def install(self, application: FastAPI) -> None:
        build: Callable[[], dict[str, Any]] = application.openapi

        def openapi() -> dict[str, Any]:
            schema = build()
            components = schema.setdefault("components", {}).setdefault("schemas", {})
            components.setdefault(SHARED_ERROR_SCHEMA, ErrorPublic.model_json_schema())
            ref = {"$ref": f"#/components/schemas/{SHARED_ERROR_SCHEMA}"}
            for (method, path), codes in self.codes.items():
                operation = schema.get("paths", {}).get(path, {}).get(method)
                if operation is None:
                    continue
                responses = operation.setdefault("responses", {})
                for code in sorted(codes):
                    responses.setdefault(
                        str(code),
                        {
                            "description": _DOCS[code],
                            "content": {"application/json": {"schema": ref}},
                        },
                    )
            return schema

        application.openapi = openapi  # type: ignore[method-assign]


def _too_big(where: str, values: Any, limit: int) -> list[dict[str, Any]]:
    out = []
    for name, value in values.items():
        try:
            number = int(value)
        except (TypeError, ValueError):
            continue
        if abs(number) > limit:
            out.append(
                {
                    "loc": [where, name],
                    "msg": f"{number} is out of range: at most {limit} in size",
                    "type": "out_of_range",
                }
            )
    return out


async def value_out_of_range(request: Request, exc: Exception) -> JSONResponse:
    """A value the database cannot hold: 422 in the shape of a validation error instead of a
    500. SQLite stops at 2**63 - 1 (Python raises OverflowError); PostgreSQL's ``integer``
    columns at 2**31 - 1 (a DataError, as is a text too long for its column). URL parameters
    past the limit are named; otherwise the database's own words say what did not fit."""
    limit = MAX_DB_INT if request.app.state.settings.is_sqlite else MAX_PG_INT
    errors = _too_big("path", request.path_params, limit) + _too_big(
        "query", request.query_params, limit
    )
    if not errors:
        orig = getattr(exc, "orig", None) or exc
        first = str(orig).strip().splitlines()[0] if str(orig).strip() else type(orig).__name__
        errors = [
            {
                "loc": ["body"],
                "msg": f"a value does not fit the database: {first}",
                "type": "out_of_range",
            }
        ]
    return JSONResponse({"detail": errors}, status_code=422)


BUSY_RETRY_SECONDS = 1


def is_lock_timeout(exc: BaseException) -> bool:
    """True for SQLite's "database is locked" / "busy": the write lock was not free within
    the busy timeout (a long import or many saves at once). Nothing was written."""
    orig = getattr(exc, "orig", None) or exc
    text = str(orig).lower()
    return (
        "database is locked" in text
        or "database table is locked" in text
        or "database is busy" in text
    )


def busy_answer(request: Request) -> JSONResponse:
    """503 with Retry-After: the request changed nothing and may be sent again as it is."""
    return JSONResponse(
        {
            "detail": "the database is busy (another writer, such as a large import, holds it); "
            f"nothing was stored: send the request again in {BUSY_RETRY_SECONDS} s",
            "kind": "busy",
            "retry_after": BUSY_RETRY_SECONDS,
        },
        status_code=503,
        headers={"Retry-After": str(BUSY_RETRY_SECONDS)},
    )
