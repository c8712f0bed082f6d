"""Accounts over HTTP: admins create, re-role, disable and enable users (API and page forms);
the failed-login delay counts per account and per address; logout and disabled accounts end
access; expired sessions are refused."""

from __future__ import annotations

import time
from datetime import timedelta

from fastapi.testclient import TestClient
from sqlalchemy import select

from app.models import LoginFailure, User, UserSession, utcnow
from app.security import SESSION_COOKIE, FailureCounts, failure_counts, login_delay
from tests.app.conftest import PASSWORD

NEW_PASSWORD = "a long pass phrase"


def _client(app, address: str = "testclient") -> TestClient:  # type: ignore[no-untyped-def]
    return TestClient(app, client=(address, 50000))


def _login(client: TestClient, username: str, password: str = PASSWORD) -> int:
    return client.post(
        "/login", data={"username": username, "password": password}, follow_redirects=False
    ).status_code


# --------------------------------------------------------------------------- administration
def test_accounts_admin_manages_users_through_the_api(app, login, db) -> None:
    admin = login("admin")
    made = admin.client.post(
        "/api/users",
        headers=admin.headers(),
        json={
            "username": "bosun",
            "password": NEW_PASSWORD,
            "role": "annotator",
            "display_name": "Bosun",
        },
    )
    assert made.status_code == 201, made.text
    uid = made.json()["id"]
    bosun = _client(app, "10.1.0.1")
    assert _login(bosun, "bosun", NEW_PASSWORD) == 303
    assert bosun.get("/api/review").status_code == 403  # annotators do not review

    up = admin.client.patch(
        f"/api/users/{uid}", headers=admin.headers(), json={"role": "adjudicator"}
    )
    assert up.status_code == 200 and up.json()["role"] == "adjudicator"
    assert bosun.get("/api/review").status_code == 200  # the same session, new role

    off = admin.client.patch(f"/api/users/{uid}", headers=admin.headers(), json={"active": False})
    assert off.status_code == 200 and off.json()["active"] is False
    assert bosun.get("/api/session").status_code == 401
    assert _login(_client(app, "10.1.0.2"), "bosun", NEW_PASSWORD) == 401

    on = admin.client.patch(f"/api/users/{uid}", headers=admin.headers(), json={"active": True})
    assert on.status_code == 200
    assert _login(_client(app, "10.1.0.3"), "bosun", NEW_PASSWORD) == 303
    listed = admin.client.get("/api/users").json()
    assert {"bosun", "ann1", "admin"} <= {u["username"] for u in listed}
    assert all("password" not in str(u).lower() for u in listed)


def test_accounts_admin_manages_users_through_the_page(app, login, db) -> None:
    admin = login("admin")
    page = admin.client.get("/users")
    assert page.status_code == 200 and 'name="csrf_token"' in page.text
    made = admin.client.post(
        "/users",
        data={
            "csrf_token": admin.csrf,
            "username": "purser",
            "display_name": "Purser",
            "role": "annotator",
            "password": NEW_PASSWORD,
        },
        follow_redirects=False,
    )
    assert made.status_code == 303, made.text
    user = db.scalar(select(User).where(User.username == "purser"))
    assert user is not None and user.role == "annotator" and user.active
    assert (
        admin.client.post(
            f"/users/{user.id}/role",
            data={"csrf_token": admin.csrf, "role": "adjudicator"},
            follow_redirects=False,
        ).status_code
        == 303
    )
    assert (
        admin.client.post(
            f"/users/{user.id}/active",
            data={"csrf_token": admin.csrf, "active": "false"},
            follow_redirects=False,
        ).status_code
        == 303
    )
    db.expire_all()
    assert user.role == "adjudicator" and user.active is False
    # a refused change says why on the page and changes nothing
    bad = admin.client.post(
        f"/users/{user.id}/role", data={"csrf_token": admin.csrf, "role": "captain"}
    )
    assert bad.status_code == 422 and "unknown role" in bad.text
    db.expire_all()
    assert user.role == "adjudicator"


def test_accounts_only_admins_manage_users(login, people) -> None:
    for name in ("ann1", "adj"):
        me = login(name)
        assert me.client.get("/api/users").status_code == 403
        assert (
            me.client.post(
                "/api/users",
                headers=me.headers(),
                json={"username": "stowaway", "password": NEW_PASSWORD, "role": "admin"},
            ).status_code
            == 403
        )
        assert (
            me.client.patch(
                f"/api/users/{me.user_id}", headers=me.headers(), json={"role": "admin"}
            ).status_code
            == 403
        )
        assert me.client.get("/users").status_code == 403
        assert (
            me.client.post(
                f"/users/{me.user_id}/role", data={"csrf_token": me.csrf, "role": "admin"}
            ).status_code
            == 403
        )
    ann1 = login("ann1")
    assert ann1.client.get("/api/session").json()["role"] == "annotator"


# --------------------------------------------------------------------------- failed logins
def test_accounts_delay_counts_per_account_across_addresses(app, people, settings, db) -> None:
    settings.login_delay_seconds = 0.3
    # threshold failures for ann1, each from a different address
    for i in range(settings.login_delay_after):
        assert _login(_client(app, f"10.2.0.{i}"), "ann1", "wrong password") == 401
    fresh = "10.2.9.9"
    assert failure_counts(db, "ann1", fresh) == FailureCounts(settings.login_delay_after, 0)
    assert login_delay(failure_counts(db, "ann1", fresh), settings) > 0
    started = time.monotonic()
    assert _login(_client(app, fresh), "ann1") == 303  # right password: answered, but late
    assert time.monotonic() - started >= 0.3
    # another account from another address owes nothing
    assert login_delay(failure_counts(db, "ann2", "10.3.0.1"), settings) == 0


def test_accounts_delay_counts_per_address_across_accounts(app, people, settings, db) -> None:
    settings.login_delay_seconds = 0.3
    settings.login_address_delay_after = 3
    address = "10.4.0.7"
    names = ["ann1", "adj", "nobody-here"]
    for name in names:  # one failure each, for different (and unknown) accounts
        assert _login(_client(app, address), name, "wrong password") == 401
    assert failure_counts(db, "ann2", address) == FailureCounts(0, 3)
    started = time.monotonic()
    assert _login(_client(app, address), "ann2") == 303
    assert time.monotonic() - started >= 0.3
    # an untouched address never had a count
    assert login_delay(failure_counts(db, "admin", "10.4.0.8"), settings) == 0


def test_accounts_own_login_does_not_clear_the_address_count(app, people, settings, db) -> None:
    # guessing at ann1 from one address, logging in as yourself between guesses
    settings.login_delay_seconds = 0.01
    address = "10.4.1.1"
    for _ in range(settings.login_delay_after):
        assert _login(_client(app, address), "ann1", "guess") == 401
        assert _login(_client(app, address), "ann2") == 303
    counts = failure_counts(db, "ann1", address)
    assert counts == FailureCounts(settings.login_delay_after, settings.login_delay_after)
    assert login_delay(counts, settings) > 0


def test_accounts_address_threshold_spares_colleagues(app, people, settings, db) -> None:
    # a few typing mistakes by colleagues behind one address slow nobody else there
    address = "10.4.2.2"
    for name in ["ann1", "adj", "admin"]:
        assert _login(_client(app, address), name, "typo") == 401
    assert settings.login_address_delay_after > 3
    assert login_delay(failure_counts(db, "ann2", address), settings) == 0


def test_accounts_old_failures_leave_the_window(app, people, settings, db) -> None:
    long_ago = utcnow() - timedelta(hours=1)
    db.add_all([LoginFailure(username="ann1", address="10.5.0.1", at=long_ago) for _ in range(10)])
    db.commit()
    assert failure_counts(db, "ann1", "10.5.0.1") == FailureCounts(0, 0)


def test_accounts_wrong_password_and_unknown_user_answer_alike(app, people) -> None:
    a = _client(app, "10.6.0.1").post("/login", data={"username": "ann1", "password": "nope"})
    b = _client(app, "10.6.0.2").post("/login", data={"username": "ghost", "password": "nope"})
    assert a.status_code == b.status_code == 401
    assert "do not match an active account" in a.text and "do not match" in b.text
    assert SESSION_COOKIE not in a.cookies and SESSION_COOKIE not in b.cookies


# --------------------------------------------------------------------------- sessions
def test_accounts_logout_ends_only_that_session_and_the_cookie_is_dead(app, login) -> None:
    tab1, tab2 = login("ann1"), login("ann1")
    token = tab1.client.cookies.get(SESSION_COOKIE)
    assert token
    assert tab1.client.get("/logout").status_code == 405  # logging out is never a GET
    resp = tab1.client.post("/logout", data={"csrf_token": tab1.csrf}, follow_redirects=False)
    assert resp.status_code == 303 and resp.headers["location"] == "/login"
    assert tab1.client.get("/api/session").status_code == 401
    replay = TestClient(app, cookies={SESSION_COOKIE: token})
    assert replay.get("/api/session").status_code == 401
    assert tab2.client.get("/api/session").status_code == 200


def test_accounts_disabled_user_cannot_log_in_or_use_pages(app, login, db, people) -> None:
    me = login("ann2")
    people.ann2.active = False
    db.commit()
    page = me.client.get("/review", follow_redirects=False)
    assert page.status_code == 303 and page.headers["location"].startswith("/login")
    assert me.client.get("/api/queue").status_code == 401
    assert _login(_client(app, "10.7.0.1"), "ann2") == 401


def test_accounts_expired_session_is_refused(login, db) -> None:
    me = login("ann1")
    for sess in db.scalars(select(UserSession).where(UserSession.user_id == me.user_id)):
        sess.expires_at = utcnow() - timedelta(seconds=1)
    db.commit()
    assert me.client.get("/api/session").status_code == 401


def test_accounts_secure_cookie_when_configured(app, people, settings) -> None:
    settings.cookie_secure = True
    resp = _client(app).post(
        "/login", data={"username": "ann1", "password": PASSWORD}, follow_redirects=False
    )
    cookie = resp.headers["set-cookie"].lower()
    assert "secure" in cookie and "httponly" in cookie and "samesite=strict" in cookie


def test_accounts_login_posted_from_another_site_is_refused(app, people) -> None:
    client = _client(app, "10.8.0.1")
    resp = client.post(
        "/login",
        data={"username": "ann1", "password": PASSWORD},
        headers={"Sec-Fetch-Site": "cross-site"},
        follow_redirects=False,
    )
    assert resp.status_code == 403 and "another site" in resp.text
    assert SESSION_COOKIE not in resp.cookies
    ok = client.post(
        "/login",
        data={"username": "ann1", "password": PASSWORD},
        headers={"Sec-Fetch-Site": "same-origin"},
        follow_redirects=False,
    )
    assert ok.status_code == 303


def test_accounts_password_hash_cost_is_standard_unless_set(monkeypatch) -> None:
    # The suite hashes with cheap parameters (tests/conftest.py); a service that is not told
    # otherwise uses argon2-cffi's defaults. Parameters are read back from the hash itself.
    from argon2 import extract_parameters
    from argon2.profiles import RFC_9106_LOW_MEMORY

    from app.security import _HASHERS
    from app.settings import Settings

    monkeypatch.delenv("TREEWRIGHT_PASSWORD_HASH_COST", raising=False)
    assert Settings().password_hash_cost == "standard"
    standard = extract_parameters(_HASHERS["standard"].hash("s3cret-word"))
    # argon2-cffi's default profile is RFC 9106's low-memory option (the library's docs)
    assert (standard.memory_cost, standard.time_cost, standard.parallelism) == (
        RFC_9106_LOW_MEMORY.memory_cost,
        RFC_9106_LOW_MEMORY.time_cost,
        RFC_9106_LOW_MEMORY.parallelism,
    )
    cheap = extract_parameters(_HASHERS["test"].hash("s3cret-word"))
    assert cheap.memory_cost < standard.memory_cost and cheap.time_cost <= standard.time_cost
