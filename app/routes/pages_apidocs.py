"""GET /api-docs: the JSON API reference, rendered on the server from the OpenAPI document.

FastAPI's own docs pages fetch their scripts from a CDN and need inline script, which the
Content-Security-Policy forbids; this page needs no script at all. It is public, like
/openapi.json: it describes the API, it holds no data.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from app.deps import OptionalLogin
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)

METHODS = ("get", "post", "put", "patch", "delete")


def _schema_name(schema: dict[str, Any] | None) -> str:
    """A short readable type for a JSON schema (``CorpusPublic``, ``list[int]``, ``string``)."""
    if not schema:
        return ""
    if "$ref" in schema:
        return str(schema["$ref"]).rsplit("/", 1)[-1]
    if "anyOf" in schema:
        return " | ".join(_schema_name(s) for s in schema["anyOf"])
    if schema.get("type") == "array":
        return f"list[{_schema_name(schema.get('items'))}]"
    return str(schema.get("type", "object"))


def _body_schema(op: dict[str, Any]) -> str:
    content = (op.get("requestBody") or {}).get("content") or {}
    return ", ".join(f"{ctype}: {_schema_name(c.get('schema'))}" for ctype, c in content.items())


def _ok_schema(op: dict[str, Any]) -> str:
    for code, resp in sorted((op.get("responses") or {}).items()):
        if str(code).startswith("2"):
            content = resp.get("content") or {}
            schema = (content.get("application/json") or {}).get("schema")
            return f"{code} {_schema_name(schema)}".strip()
    return ""


def _build(spec: dict[str, Any]) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    operations = []
    for path, item in sorted(spec.get("paths", {}).items()):
        for method in METHODS:
            op = item.get(method)
            if op is None:
                continue
            params = [
                {
                    "name": p["name"],
                    "where": p.get("in", ""),
                    "required": p.get("required", False),
                    "type": _schema_name(p.get("schema")),
                }
                for p in op.get("parameters", [])
            ]
            operations.append(
                {
                    "method": method.upper(),
                    "path": path,
                    "summary": op.get("summary", ""),
                    "description": op.get("description", ""),
                    "tag": (op.get("tags") or [""])[0],
                    "params": params,
                    "body": _body_schema(op),
                    "ok": _ok_schema(op),
                    "codes": sorted(str(c) for c in (op.get("responses") or {})),
                    "anchor": f"{method}-{path}".replace("/", "-")
                    .replace("{", "")
                    .replace("}", ""),
                }
            )
    schemas = []
    for name, schema in sorted(spec.get("components", {}).get("schemas", {}).items()):
        required = set(schema.get("required", []))
        fields = [
            {
                "name": field,
                "type": _schema_name(sub),
                "required": field in required,
                "description": sub.get("description", ""),
            }
            for field, sub in (schema.get("properties") or {}).items()
        ]
        schemas.append(
            {"name": name, "description": schema.get("description", ""), "fields": fields}
        )
    return operations, schemas


@router.get("/api-docs", response_class=HTMLResponse)
def api_docs(request: Request, login: OptionalLogin) -> HTMLResponse:
    cached = getattr(request.app.state, "api_reference", None)
    if cached is None:  # built once per process: the routes do not change while it runs
        cached = _build(request.app.openapi())
        request.app.state.api_reference = cached
    operations, schemas = cached
    return render(
        request,
        "apidocs.html",
        login,
        nav="api",
        operations=operations,
        schemas=schemas,
        version=request.app.version,
    )
