"""Login, logout, CSRF and the failed-login delay."""

from __future__ import annotations

import stat

from fastapi.testclient import TestClient

from tests.app.conftest import PASSWORD


def test_auth_health_answers_without_login(app) -> None:
    resp = TestClient(app).get("/api/health")
    assert resp.status_code == 200
    assert resp.json()["status"] == "ok"
    assert resp.json()["schema_revision"] is not None


def test_auth_api_needs_login(app) -> None:
    assert TestClient(app).get("/api/session").status_code == 401


def test_auth_login_sets_httponly_samesite_cookie(app, people) -> None:
    client = TestClient(app)
    resp = client.post(
        "/login", data={"username": "ann1", "password": PASSWORD}, follow_redirects=False
    )
    assert resp.status_code == 303
    cookie = resp.headers["set-cookie"].lower()
    assert "httponly" in cookie and "samesite=strict" in cookie
    assert client.get("/api/session").json()["username"] == "ann1"


def test_auth_wrong_password_is_refused(app, people) -> None:
    client = TestClient(app)
    resp = client.post(
        "/login", data={"username": "ann1", "password": "nope"}, follow_redirects=False
    )
    assert resp.status_code == 401
    assert client.get("/api/session").status_code == 401


def test_auth_logout_needs_csrf_and_ends_session(login) -> None:
    me = login("ann1")
    assert me.client.post("/logout", follow_redirects=False).status_code == 403
    resp = me.client.post("/logout", data={"csrf_token": me.csrf}, follow_redirects=False)
    assert resp.status_code == 303
    assert me.client.get("/api/session").status_code == 401


def test_auth_disabled_user_loses_access(login, db, people) -> None:
    me = login("ann2")
    people.ann2.active = False
    db.commit()
    assert me.client.get("/api/session").status_code == 401


def test_auth_repeated_failures_are_delayed(app, people, settings, db) -> None:
    from app.security import failure_counts, login_delay

    client = TestClient(app)
    for _ in range(settings.login_delay_after + 1):
        client.post("/login", data={"username": "ann1", "password": "bad"})
    counts = failure_counts(db, "ann1", "testclient")
    assert counts.account == counts.address == settings.login_delay_after + 1
    assert login_delay(counts, settings) > 0
    # a correct login still works (after the delay) and restarts the account's count only
    ok = client.post(
        "/login", data={"username": "ann1", "password": PASSWORD}, follow_redirects=False
    )
    assert ok.status_code == 303
    after = failure_counts(db, "ann1", "testclient")
    assert after.account == 0 and after.address == settings.login_delay_after + 1


def test_auth_secret_key_file_is_private(tmp_path) -> None:
    from app.settings import Settings

    s = Settings(data_dir=tmp_path / "d")
    key = s.resolved_secret_key()
    mode = stat.S_IMODE((tmp_path / "d" / "secret_key").stat().st_mode)
    assert mode == 0o600 and len(key) > 40
    assert s.resolved_secret_key() == key


def test_auth_security_headers(app) -> None:
    resp = TestClient(app).get("/login")
    csp = resp.headers["content-security-policy"]
    assert "script-src 'self'" in csp and "unsafe-inline" not in csp
    assert "frame-ancestors 'none'" in csp
    assert resp.headers["x-content-type-options"] == "nosniff"


def test_auth_login_redirect_stays_on_site(app, people) -> None:
    resp = TestClient(app).post(
        "/login",
        data={"username": "ann1", "password": PASSWORD, "next": "//evil.example/x"},
        follow_redirects=False,
    )
    assert resp.headers["location"] == "/"
