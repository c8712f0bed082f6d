"""The Users page and /api/users: admins create, re-role, disable, set passwords."""

from __future__ import annotations

from sqlalchemy import select

from app.models import User


def test_users_page_create_role_disable(login, db, people) -> None:
    admin = login("admin")
    page = admin.client.get("/users")
    assert page.status_code == 200 and "ann1" in page.text
    made = admin.client.post(
        "/users",
        data={
            "csrf_token": admin.csrf,
            "username": "rigger",
            "role": "annotator",
            "password": "a long secret",
        },
        follow_redirects=True,
    )
    assert "The account was created." in made.text
    rigger = db.scalar(select(User).where(User.username == "rigger"))
    admin.client.post(
        f"/users/{rigger.id}/role", data={"csrf_token": admin.csrf, "role": "adjudicator"}
    )
    other = login("ann2")
    admin.client.post(
        f"/users/{people.ann2.id}/active", data={"csrf_token": admin.csrf, "active": "false"}
    )
    db.expire_all()
    assert db.get(User, rigger.id).role == "adjudicator"
    assert not db.get(User, people.ann2.id).active
    assert other.client.get("/api/session").status_code == 401


def test_users_page_errors_and_permissions(login, people) -> None:
    admin = login("admin")
    short = admin.client.post(
        "/users",
        data={"csrf_token": admin.csrf, "username": "x", "role": "annotator", "password": "short"},
    )
    assert short.status_code == 422 and "at least 10" in short.text
    last = admin.client.post(
        f"/users/{people.admin.id}/active", data={"csrf_token": admin.csrf, "active": "false"}
    )
    assert last.status_code == 409 and "last active admin" in last.text
    ann = login("ann1")
    assert ann.client.get("/users").status_code == 403
    assert ann.client.get("/api/users").status_code == 403


def test_users_api(login, db, people) -> None:
    admin = login("admin")
    made = admin.client.post(
        "/api/users",
        headers=admin.headers(),
        json={"username": "stoker", "password": "coal and steam", "role": "annotator"},
    )
    assert made.status_code == 201 and made.json()["active"] is True
    uid = made.json()["id"]
    changed = admin.client.patch(
        f"/api/users/{uid}", headers=admin.headers(), json={"role": "adjudicator", "active": False}
    )
    assert changed.status_code == 200
    assert changed.json()["role"] == "adjudicator" and changed.json()["active"] is False
    listing = admin.client.get("/api/users").json()
    assert "stoker" in [u["username"] for u in listing]
    bad = admin.client.post(
        "/api/users", headers=admin.headers(), json={"username": "a b", "password": "long enough!!"}
    )
    assert bad.status_code == 422
    assert (
        admin.client.post("/api/users", json={"username": "z", "password": "x" * 12}).status_code
        == 403
    )  # no CSRF header
