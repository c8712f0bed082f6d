"""Logging in and out: the failed-login delay, the password check, the session and its events.

What it does
    A login attempt is three steps, so that nothing holds a database connection while it waits
    or hashes: :func:`look_up` (one short session: the account's id and hash, and the delay
    owed, see :func:`app.security.login_delay`), then ``app.security.check_password`` (argon2,
    slow on purpose; no database), then :func:`finish` (one short session: record the failure,
    or start a session and log a ``login`` event). :func:`log_out` ends the session and logs
    ``logout``. ``finish`` and ``log_out`` commit.

``look_up`` and ``finish`` open their own session from the factory they are given and close
it before returning; an async route runs them in a worker thread and may sleep or hash in
between without keeping a pooled connection. Cost: one look-up and three counting queries
for ``look_up``; a few small writes for ``finish``.
"""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy.orm import Session, sessionmaker

from app.db import session_scope
from app.models import Event, User
from app.security import (
    create_session,
    end_session,
    failure_counts,
    login_delay,
    record_failure,
    user_password,
)
from app.settings import Settings


@dataclass(frozen=True)
class Attempt:
    """What a login attempt needs before its password check: the active account's id and
    hash (None for an unknown or disabled name) and the seconds to wait first."""

    found: tuple[int, str] | None
    delay: float


def look_up(
    factory: sessionmaker[Session], username: str, address: str, settings: Settings
) -> Attempt:
    """The account and the delay owed, read in one short session (closed on return)."""
    with session_scope(factory) as db:
        return Attempt(
            found=user_password(db, username),
            delay=login_delay(failure_counts(db, username, address), settings),
        )


def finish(
    factory: sessionmaker[Session],
    account: int | None,
    username: str,
    address: str,
    settings: Settings,
) -> str | None:
    """The new session's cookie token for ``account`` (the id a password check returned);
    None, with the failure recorded, when there is none or it was disabled meanwhile.
    Commits, in one short session of its own."""
    with session_scope(factory) as db:
        user = db.get(User, account) if account is not None else None
        if user is None or not user.active:
            record_failure(db, username, address)
            return None
        token, _ = create_session(db, user, settings)
        db.add(Event(user_id=user.id, kind="login", detail={"address": address}))
        return token


def log_out(db: Session, user: User, token: str | None) -> None:
    """End the session of ``token`` and log it. Commits."""
    end_session(db, token)
    db.add(Event(user_id=user.id, kind="logout"))
    db.commit()
