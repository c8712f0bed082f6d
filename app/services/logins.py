"""Logging in and out: the failed-login delay, the password check, the session and its events.

What it does
    :func:`login_delay_for` says how long to wait before answering a login attempt (growing with
    the recent failures of the account or the address, see :func:`app.security.login_delay`).
    :func:`log_in` checks the password (argon2, slow on purpose), then either records the failure
    or clears the failures, starts a session and logs a ``login`` event; :func:`log_out` ends
    the session and logs ``logout``. Both commit.

These functions block (database and argon2): an async route calls them in a worker thread.
Cost: two counting queries for the delay; one user look-up, one argon2 verify and a few small
writes for a login.
"""

from __future__ import annotations

from sqlalchemy.orm import Session

from app.models import Event, User
from app.security import (
    authenticate,
    clear_failures,
    create_session,
    end_session,
    login_delay,
    recent_failures,
    record_failure,
)
from app.settings import Settings


def login_delay_for(db: Session, username: str, address: str, settings: Settings) -> float:
    """Seconds to wait before answering this attempt (0 below the failure threshold)."""
    return login_delay(recent_failures(db, username, address), settings)


def log_in(db: Session, username: str, password: str, address: str,
           settings: Settings) -> str | None:
    """The new session's cookie token, or None (failure recorded) when the user name and
    password do not match an active account. Commits."""
    user = authenticate(db, username, password)
    if user is None:
        record_failure(db, username, address)
        db.commit()
        return None
    clear_failures(db, username, address)
    token, _ = create_session(db, user, settings)
    db.add(Event(user_id=user.id, kind="login", detail={"address": address}))
    db.commit()
    return token


def log_out(db: Session, user: User, token: str | None) -> None:
    """End the session of ``token`` and log it. Commits."""
    end_session(db, token)
    db.add(Event(user_id=user.id, kind="logout"))
    db.commit()
