"""User administration: create, list, re-role, disable or enable, set a password.

Disabling a user or setting their password ends every login session they have. The last
active admin can neither be disabled nor lose the admin role, so the team cannot lock itself
out. Passwords are hashed with argon2 (app.security).
"""

from __future__ import annotations

import re

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.models import ROLE_ADMIN, ROLES, Event, User
from app.security import end_all_sessions, hash_password
from app.services.corpora import clean_name
from app.services.errors import BadInput, Conflict, NotFound
from app.services.transactions import unit_of_work

USERNAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")
MIN_PASSWORD = 10


def check_username(username: str) -> str:
    name = (username or "").strip()
    if not USERNAME_RE.match(name):
        raise BadInput(
            f"user name {name!r}: 1 to 64 letters, digits, '.', '_' or '-', "
            "starting with a letter or digit"
        )
    return name


def check_password(password: str) -> str:
    if len(password or "") < MIN_PASSWORD:
        raise BadInput(f"a password needs at least {MIN_PASSWORD} characters")
    if len(password) > 1024:
        raise BadInput("a password has at most 1024 characters")
    return password


def check_role(role: str) -> str:
    if role not in ROLES:
        raise BadInput(f"unknown role {role!r}; one of {', '.join(ROLES)}")
    return role


def get_user(db: Session, user_id: int) -> User:
    user = db.get(User, user_id)
    if user is None:
        raise NotFound(f"no user with id {user_id}")
    return user


def user_by_name(db: Session, username: str) -> User:
    user = db.scalar(select(User).where(User.username == username))
    if user is None:
        raise NotFound(f"no user named {username!r}")
    return user


def list_users(db: Session) -> list[User]:
    return list(db.scalars(select(User).order_by(User.username)))


@unit_of_work
def create_user(
    db: Session,
    username: str,
    password: str,
    role: str,
    *,
    display_name: str = "",
    by: User | None = None,
) -> User:
    """A new active account. Commits (``create_user.step`` does not)."""
    username = check_username(username)
    check_password(password)
    check_role(role)
    if db.scalar(select(User.id).where(func.lower(User.username) == username.lower())):
        raise Conflict(f"the user name {username!r} is taken")
    display_name = (display_name or "").strip()[:128]
    if display_name:
        display_name = clean_name(display_name, "display", 128)
    user = User(
        username=username,
        display_name=display_name,
        password_hash=hash_password(password),
        role=role,
        active=True,
    )
    db.add(user)
    db.flush()
    db.add(
        Event(
            user_id=by.id if by else None,
            kind="user_created",
            detail={"username": username, "role": role},
        )
    )
    return user


def _other_active_admins(db: Session, user: User) -> int:
    return (
        db.scalar(
            select(func.count())
            .select_from(User)
            .where(User.role == ROLE_ADMIN, User.active.is_(True), User.id != user.id)
        )
        or 0
    )


@unit_of_work
def set_role(db: Session, user: User, role: str, *, by: User | None = None) -> User:
    """Change the account's role; the last active admin keeps theirs. Commits."""
    check_role(role)
    if (
        user.role == ROLE_ADMIN
        and role != ROLE_ADMIN
        and user.active
        and _other_active_admins(db, user) == 0
    ):
        raise Conflict(f"{user.username} is the last active admin; make someone else admin first")
    old = user.role
    user.role = role
    db.add(
        Event(
            user_id=by.id if by else None,
            kind="user_role",
            detail={"username": user.username, "from": old, "to": role},
        )
    )
    db.flush()
    return user


@unit_of_work
def set_active(db: Session, user: User, active: bool, *, by: User | None = None) -> User:
    """Disable (ending all their sessions) or enable a user. Commits."""
    if (
        not active
        and user.role == ROLE_ADMIN
        and user.active
        and _other_active_admins(db, user) == 0
    ):
        raise Conflict(f"{user.username} is the last active admin and cannot be disabled")
    user.active = active
    if not active:
        end_all_sessions(db, user.id)
    db.add(
        Event(
            user_id=by.id if by else None,
            kind="user_enabled" if active else "user_disabled",
            detail={"username": user.username},
        )
    )
    db.flush()
    return user


@unit_of_work
def set_password(db: Session, user: User, password: str, *, by: User | None = None) -> User:
    """A new password; every session of the user ends (they log in again). Commits."""
    check_password(password)
    user.password_hash = hash_password(password)
    end_all_sessions(db, user.id)
    db.add(
        Event(
            user_id=by.id if by else None, kind="user_password", detail={"username": user.username}
        )
    )
    db.flush()
    return user


@unit_of_work
def update_user(
    db: Session,
    user: User,
    *,
    role: str | None = None,
    active: bool | None = None,
    password: str | None = None,
    by: User | None = None,
) -> User:
    """Change role, active state and/or password together: all of them or none. Commits."""
    if role is not None:
        set_role.step(db, user, role, by=by)
    if active is not None:
        set_active.step(db, user, active, by=by)
    if password is not None:
        set_password.step(db, user, password, by=by)
    return user


def active_users(db: Session) -> list[User]:
    """Every active account, by user name."""
    return list(db.scalars(select(User).where(User.active.is_(True)).order_by(User.username)))
