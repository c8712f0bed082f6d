"""User administration: create, re-role, disable (ending sessions), passwords, last admin."""

from __future__ import annotations

import pytest
from sqlalchemy import func, select

from app.models import ROLE_ADJUDICATOR, ROLE_ADMIN, ROLE_ANNOTATOR, UserSession
from app.security import authenticate
from app.services.errors import BadInput, Conflict
from app.services.users import create_user, set_active, set_password, set_role


def test_users_create_and_log_in(db) -> None:
    user = create_user(
        db, "deckhand.two", "long enough pw", ROLE_ANNOTATOR, display_name="Deck Two"
    )
    db.commit()
    assert authenticate(db, "deckhand.two", "long enough pw").id == user.id
    assert authenticate(db, "deckhand.two", "wrong password!") is None
    assert user.password_hash != "long enough pw"


@pytest.mark.parametrize(
    "name, password, role, message",
    [
        ("", "long enough pw", ROLE_ANNOTATOR, "user name"),
        ("has space", "long enough pw", ROLE_ANNOTATOR, "user name"),
        ("ok", "short", ROLE_ANNOTATOR, "at least 10"),
        ("ok", "long enough pw", "captain", "unknown role"),
    ],
)
def test_users_create_rejects_bad_values(db, name, password, role, message) -> None:
    with pytest.raises(BadInput, match=message):
        create_user(db, name, password, role)


def test_users_names_are_unique_ignoring_case(db, people) -> None:
    with pytest.raises(Conflict, match="taken"):
        create_user(db, "ANN1", "long enough pw", ROLE_ANNOTATOR)


def test_users_disable_ends_sessions(login, db, people) -> None:
    me = login("ann1")
    assert me.client.get("/api/session").status_code == 200
    set_active(db, people.ann1, False)
    db.commit()
    assert (
        db.scalar(
            select(func.count())
            .select_from(UserSession)
            .where(UserSession.user_id == people.ann1.id)
        )
        == 0
    )
    assert me.client.get("/api/session").status_code == 401
    set_active(db, people.ann1, True)
    db.commit()
    assert authenticate(db, "ann1", "test-pass-123") is not None


def test_users_set_password_ends_sessions(login, db, people) -> None:
    me = login("ann2")
    set_password(db, people.ann2, "a brand new secret")
    db.commit()
    assert me.client.get("/api/session").status_code == 401
    assert authenticate(db, "ann2", "a brand new secret") is not None


def test_users_re_role(db, people) -> None:
    set_role(db, people.ann1, ROLE_ADJUDICATOR)
    db.commit()
    assert people.ann1.can_adjudicate and not people.ann1.is_admin


def test_users_last_admin_is_protected(db, people) -> None:
    with pytest.raises(Conflict, match="last active admin"):
        set_role(db, people.admin, ROLE_ANNOTATOR)
    with pytest.raises(Conflict, match="last active admin"):
        set_active(db, people.admin, False)
    set_role(db, people.ann1, ROLE_ADMIN)
    set_active(db, people.admin, False)  # now allowed: ann1 is an active admin
    db.commit()
    assert not people.admin.active
