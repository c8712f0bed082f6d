"""Every state-changing route refuses a request without the session's CSRF token.

The routes are enumerated from the app, so a new POST/PUT/PATCH/DELETE route is covered
without editing this file. Each is sent by a logged-in admin (the most powerful role, so a
403 can only come from the token check) without a token, with a wrong one, and with another
session's; then once with the right token, to show the request itself reaches past the check.
Every template form that posts carries the token field.
"""

from __future__ import annotations

import re

import pytest
from fastapi.routing import APIRoute

from app.settings import TEMPLATES_DIR
from tests.app.route_inventory import app_routes

CSRF_DETAIL = "missing or wrong CSRF token"
CHANGING = {"POST", "PUT", "PATCH", "DELETE"}
# Routes that run before anyone is logged in: they have no session whose token could be sent.
NO_SESSION_YET = {("POST", "/login")}


def changing_routes(application) -> list[tuple[str, str, APIRoute]]:  # type: ignore[no-untyped-def]
    found = [
        (m, p, r)
        for m, p, r in app_routes(application)
        if m in CHANGING and (m, p) not in NO_SESSION_YET
    ]
    # logging out (with the right token) ends the session the other requests need: last
    return sorted(found, key=lambda x: x[1] == "/logout")


def _fill(path: str) -> str:
    return re.sub(r"\{[^}]+\}", "1", path)


def _send(client, method: str, path: str, token: str | None, as_form: bool):  # type: ignore[no-untyped-def]
    url = _fill(path)
    if as_form:
        data = {"csrf_token": token} if token is not None else {}
        return client.request(method, url, data=data, follow_redirects=False)
    headers = {"X-CSRF-Token": token} if token is not None else {}
    return client.request(method, url, json={}, headers=headers, follow_redirects=False)


def _detail(resp) -> str:  # type: ignore[no-untyped-def]
    if resp.headers.get("content-type", "").startswith("application/json"):
        return str(resp.json().get("detail"))
    return resp.text


def test_csrf_every_changing_route_is_enumerated(app) -> None:
    routes = changing_routes(app)
    paths = {p for _, p, _ in routes}
    # the ones that exist since the first release must be among them
    assert {"/logout", "/api/bench/{sentence_id}/revisions"} <= paths
    assert len(routes) >= 10


@pytest.mark.parametrize("as_form", [False, True], ids=["header", "form-field"])
def test_csrf_refused_without_or_with_a_wrong_token(app, login, as_form) -> None:
    admin, other = login("admin"), login("adj")
    assert admin.csrf != other.csrf
    refused: list[str] = []
    passed: list[str] = []
    for method, path, _ in changing_routes(app):
        for token in (None, "", "not-the-token", other.csrf):
            resp = _send(admin.client, method, path, token, as_form)
            if resp.status_code != 403 or CSRF_DETAIL not in _detail(resp):
                refused.append(f"{method} {path} token={token!r}: {resp.status_code}")
        ok = _send(admin.client, method, path, admin.csrf, as_form)
        assert ok.status_code < 500, f"{method} {path}: {ok.status_code} {ok.text[:300]}"
        if ok.status_code == 403 and CSRF_DETAIL in _detail(ok):
            passed.append(f"{method} {path}")
    assert not refused, "accepted without the right token:\n" + "\n".join(refused)
    assert not passed, "refused even with the right token:\n" + "\n".join(passed)


def test_csrf_anonymous_changes_never_succeed(app) -> None:
    from fastapi.testclient import TestClient

    client = TestClient(app)
    for method, path, _ in changing_routes(app):
        resp = _send(client, method, path, None, as_form=path.startswith("/api/") is False)
        if path.startswith("/api/"):
            assert resp.status_code == 401, f"{method} {path}: {resp.status_code}"
        else:
            assert resp.status_code == 303 and resp.headers["location"].startswith("/login"), (
                f"{method} {path}: {resp.status_code}"
            )


FORM_RE = re.compile(r"<form\b[^>]*>.*?</form>", re.S | re.I)


def test_csrf_every_posting_template_form_carries_the_token() -> None:
    missing = []
    forms = 0
    for path in sorted(TEMPLATES_DIR.rglob("*.html")):
        for form in FORM_RE.findall(path.read_text(encoding="utf-8")):
            start = form[: form.index(">") + 1]
            action = re.search(r'action\s*=\s*"([^"]*)"', start)
            if action and ("POST", action.group(1)) in NO_SESSION_YET:
                continue  # the login form: no session yet (it has a same-origin check)
            if re.search(r'method\s*=\s*"?post', start, re.I):
                forms += 1
                if 'name="csrf_token"' not in form:
                    missing.append(f"{path.name}: {start}")
    assert forms > 0
    assert not missing, "post forms without csrf_token:\n" + "\n".join(missing)
