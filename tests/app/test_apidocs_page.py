"""The server-rendered JSON API reference lists every API operation and runs no script."""

from __future__ import annotations

from fastapi.testclient import TestClient


def test_apidocs_lists_every_api_operation(app) -> None:
    spec = app.openapi()
    page = TestClient(app).get("/api-docs")
    assert page.status_code == 200
    html = page.text
    api_paths = [p for p in spec["paths"] if p.startswith("/api/")]
    assert len(api_paths) >= 10  # the Bench, review, corpora... all publish their operations
    for path in api_paths:
        assert f"<code>{path}</code>" in html, path
    for name in spec["components"]["schemas"]:
        assert f'id="schema-{name}"' in html, name


def test_apidocs_has_no_script_and_strict_csp(app) -> None:
    page = TestClient(app).get("/api-docs")
    assert "<script" not in page.text
    csp = page.headers["content-security-policy"]
    assert "script-src 'self'" in csp and "unsafe-inline" not in csp
