"""Every answer carries the security headers, and no page pulls anything from another host.

All GET routes (enumerated from the app) are fetched as an admin, plus a static file, a 404
and a refused request: each answer has the strict Content-Security-Policy (no inline script,
no other origin), nosniff and frame-ancestors 'none'. HTML answers name no other host in a
``src`` or ``href``.
"""

from __future__ import annotations

import re

from fastapi.testclient import TestClient

from tests.app.bench_helpers import assign, make_corpus
from tests.app.route_inventory import app_routes

EXTERNAL = re.compile(r"""(?:src|href)\s*=\s*["']?(?:https?:)?//""", re.I)


def _check(resp, where: str) -> list[str]:  # type: ignore[no-untyped-def]
    out = []
    csp = resp.headers.get("content-security-policy", "")
    for part in (
        "default-src 'self'",
        "script-src 'self'",
        "frame-ancestors 'none'",
        "object-src 'none'",
    ):
        if part not in csp:
            out.append(f"{where}: CSP lacks {part!r}: {csp!r}")
    if "unsafe-inline" in csp or "unsafe-eval" in csp or "http" in csp:
        out.append(f"{where}: CSP allows inline/eval or another host: {csp!r}")
    if resp.headers.get("x-content-type-options") != "nosniff":
        out.append(f"{where}: no nosniff")
    if "text/html" in resp.headers.get("content-type", "") and EXTERNAL.search(resp.text):
        out.append(f"{where}: refers to another host: {EXTERNAL.search(resp.text).group()}")
    return out


def test_permissions_headers_on_every_answer(app, db, people, login) -> None:
    corpus, sentences = make_corpus(db)
    assign(db, sentences[:1], people.admin)
    admin = login("admin")
    ids = {
        "{sentence_id}": str(sentences[0].id),
        "{corpus_id}": str(corpus.id),
        "{version_id}": "1",
        "{user_id}": str(admin.user_id),
    }
    queries = {
        "/agreement/log.csv": "?corpus=" + str(corpus.id),
        "/api/grammars": "?corpus_id=" + str(corpus.id),
    }
    problems: list[str] = []
    fetched = 0
    for method, path, _ in app_routes(app):
        if method != "GET":
            continue
        url = path
        for key, value in ids.items():
            url = url.replace(key, value)
        resp = admin.client.get(url + queries.get(path, ""), follow_redirects=False)
        assert resp.status_code < 500, (url, resp.status_code)
        problems += _check(resp, f"GET {url} ({resp.status_code})")
        fetched += 1
    anonymous = TestClient(app)
    for url in ("/static/css/base.css", "/no/such/page", "/api/queue", "/login"):
        problems += _check(anonymous.get(url, follow_redirects=False), f"anonymous GET {url}")
    assert fetched >= 20
    assert not problems, "\n".join(problems)


def test_permissions_headers_no_docs_page_with_foreign_scripts(app) -> None:
    client = TestClient(app)
    for url in ("/docs", "/redoc"):
        assert client.get(url).status_code == 404
    schema = client.get("/openapi.json")
    assert schema.status_code == 200 and schema.json()["info"]["title"] == "Treewright"
