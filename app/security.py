"""Passwords (argon2), server-side login sessions, CSRF tokens and the failed-login delay."""

from __future__ import annotations

import asyncio
import contextlib
import hashlib
import hmac
import os
import secrets
import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from datetime import timedelta

from argon2 import PasswordHasher
from argon2.exceptions import InvalidHashError, VerificationError
from sqlalchemy import delete, func, select
from sqlalchemy.orm import Session

from app.models import Event, LoginFailure, User, UserSession, utcnow
from app.settings import Settings, get_settings

SESSION_COOKIE = "tw_session"
CSRF_HEADER = "X-CSRF-Token"
CSRF_FIELD = "csrf_token"
FAILURE_WINDOW = timedelta(minutes=15)
MAX_LOGIN_DELAY = 10.0

# argon2-cffi's defaults (the library's RFC 9106 low-memory profile),
# and parameters cheap enough for a test suite that logs in thousands of times.
_HASHERS = {
    "standard": PasswordHasher(),
    "test": PasswordHasher(time_cost=1, memory_cost=8, parallelism=1),
}


HASHING_NICENESS = 10  # how much lower than the rest of the service a password check runs
_hashing_pool: ThreadPoolExecutor | None = None
_hashing_pool_lock = threading.Lock()


def _lower_priority() -> None:
    # Linux keeps a nice value per thread, and the threads argon2 starts for its lanes inherit
    # it from this one; elsewhere this is a harmless no-op.
    with contextlib.suppress(OSError, AttributeError):
        os.setpriority(os.PRIO_PROCESS, threading.get_native_id(), HASHING_NICENESS)


def _hashing_threads() -> ThreadPoolExecutor:
    """The process's own small pool for password checks, sized to the cores: one argon2 check
    runs ``parallelism`` threads (4 with the standard parameters), so it holds the usable cores
    divided by that, at least one; its threads run at a lower CPU priority."""
    global _hashing_pool
    with _hashing_pool_lock:
        if _hashing_pool is None:
            cores = len(os.sched_getaffinity(0))
            _hashing_pool = ThreadPoolExecutor(
                max_workers=max(1, cores // _hasher().parallelism),
                thread_name_prefix="password-check",
                initializer=_lower_priority,
            )
        return _hashing_pool


async def check_password_off_loop(found: tuple[int, str] | None, password: str) -> int | None:
    """``check_password`` in the password-check pool: a crowd of logins waits in its queue
    (cheaply, as pending futures) instead of taking the request threads and every core."""
    loop = asyncio.get_running_loop()
    return await loop.run_in_executor(_hashing_threads(), check_password, found, password)


def _hasher() -> PasswordHasher:
    """The hasher the setting ``password_hash_cost`` names. A hash records its parameters, so
    verifying always costs what hashing that password cost."""
    return _HASHERS[get_settings().password_hash_cost]


def hash_password(password: str) -> str:
    return _hasher().hash(password)


def verify_password(password_hash: str, password: str) -> bool:
    try:
        return _hasher().verify(password_hash, password)
    except (VerificationError, InvalidHashError):
        return False


def _token_hash(token: str) -> str:
    return hashlib.sha256(token.encode()).hexdigest()


def create_session(db: Session, user: User, settings: Settings) -> tuple[str, UserSession]:
    """Start a login session; returns the raw cookie token (stored only as a hash)."""
    token = secrets.token_urlsafe(32)
    sess = UserSession(
        token_hash=_token_hash(token),
        user_id=user.id,
        csrf_token=secrets.token_urlsafe(24),
        expires_at=utcnow() + timedelta(hours=settings.session_hours),
    )
    db.add(sess)
    db.flush()
    return token, sess


def find_session(db: Session, token: str | None) -> UserSession | None:
    """The live session for a cookie token, with an active user; None otherwise."""
    if not token:
        return None
    sess = db.scalar(select(UserSession).where(UserSession.token_hash == _token_hash(token)))
    if sess is None or sess.expires_at < utcnow() or not sess.user.active:
        return None
    return sess


def end_session(db: Session, token: str | None) -> None:
    if token:
        db.execute(delete(UserSession).where(UserSession.token_hash == _token_hash(token)))


def end_all_sessions(db: Session, user_id: int) -> None:
    db.execute(delete(UserSession).where(UserSession.user_id == user_id))


def csrf_ok(sess: UserSession, supplied: str | None) -> bool:
    return bool(supplied) and hmac.compare_digest(sess.csrf_token, supplied or "")


@dataclass(frozen=True)
class FailureCounts:
    """Recent failed logins against one account and, separately, from one address."""

    account: int
    address: int


def failure_counts(db: Session, username: str, address: str) -> FailureCounts:
    """Failed logins in the window against ``username`` and from ``address``, kept apart.

    The account's count restarts at its last successful login (its owner proved who they
    are); the address's count is never cleared by a success, so logging in as yourself
    between guesses at other accounts wins nothing. Both only look back FAILURE_WINDOW.
    """
    since = utcnow() - FAILURE_WINDOW
    last_login = db.scalar(
        select(func.max(Event.at))
        .join(User, User.id == Event.user_id)
        .where(Event.at >= since, Event.kind == "login", User.username == username)
    )
    by_user = (
        db.scalar(
            select(func.count())
            .select_from(LoginFailure)
            .where(
                LoginFailure.at >= max(since, last_login or since),
                LoginFailure.username == username[:64],
            )
        )
        or 0
    )
    by_addr = (
        db.scalar(
            select(func.count())
            .select_from(LoginFailure)
            .where(LoginFailure.at >= since, LoginFailure.address == address[:64])
        )
        or 0
    )
    return FailureCounts(account=by_user, address=by_addr)


def _delay_past(failures: int, threshold: int, settings: Settings) -> float:
    over = failures - threshold + 1
    if over <= 0:
        return 0.0
    return min(MAX_LOGIN_DELAY, settings.login_delay_seconds * over)


def login_delay(counts: FailureCounts, settings: Settings) -> float:
    """Seconds to wait before answering, growing with failures past either threshold.

    The address threshold is the higher one, so colleagues behind one address are not slowed
    by each other's typing mistakes, only by many failures against many accounts.
    """
    return max(
        _delay_past(counts.account, settings.login_delay_after, settings),
        _delay_past(counts.address, settings.login_address_delay_after, settings),
    )


def record_failure(db: Session, username: str, address: str) -> None:
    db.add(LoginFailure(username=username[:64], address=address[:64]))


def user_password(db: Session, username: str) -> tuple[int, str] | None:
    """The id and password hash of the active account ``username``; None if there is none."""
    row = db.execute(
        select(User.id, User.password_hash, User.active).where(User.username == username)
    ).first()
    if row is None or not row.active:
        return None
    return row.id, row.password_hash


def check_password(found: tuple[int, str] | None, password: str) -> int | None:
    """The account id when ``password`` is right; argon2 either way (a dummy hash for an
    unknown name), so timing says nothing about which names exist. Pure CPU, no database:
    async callers use ``check_password_off_loop``."""
    if found is None:
        verify_password(_dummy_hash(), password)
        return None
    return found[0] if verify_password(found[1], password) else None


def authenticate(db: Session, username: str, password: str) -> User | None:
    """The active account for this name and password (CLI and tests; the login page uses
    ``user_password`` and ``check_password`` so no connection is held while hashing)."""
    account = check_password(user_password(db, username), password)
    return db.get(User, account) if account is not None else None


_DUMMY_HASHES: dict[str, str] = {}


def _dummy_hash() -> str:
    """A hash of a random password with the current parameters (made on first use)."""
    cost = get_settings().password_hash_cost
    if cost not in _DUMMY_HASHES:
        _DUMMY_HASHES[cost] = _HASHERS[cost].hash(secrets.token_urlsafe(16))
    return _DUMMY_HASHES[cost]
