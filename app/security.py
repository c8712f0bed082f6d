"""Passwords (argon2), server-side login sessions, CSRF tokens and the failed-login delay."""

from __future__ import annotations

import hashlib
import hmac
import secrets
from datetime import timedelta

from argon2 import PasswordHasher
from argon2.exceptions import InvalidHashError, VerificationError
from sqlalchemy import delete, func, or_, select
from sqlalchemy.orm import Session

from app.models import LoginFailure, User, UserSession, utcnow
from app.settings import Settings, get_settings

SESSION_COOKIE = "tw_session"
CSRF_HEADER = "X-CSRF-Token"
CSRF_FIELD = "csrf_token"
FAILURE_WINDOW = timedelta(minutes=15)
MAX_LOGIN_DELAY = 10.0

# argon2-cffi's defaults (the library's RFC 9106 low-memory profile),
# and parameters cheap enough for a test suite that logs in thousands of times.
_HASHERS = {"standard": PasswordHasher(),
            "test": PasswordHasher(time_cost=1, memory_cost=8, parallelism=1)}


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
    sess = UserSession(token_hash=_token_hash(token), user_id=user.id,
                       csrf_token=secrets.token_urlsafe(24),
                       expires_at=utcnow() + timedelta(hours=settings.session_hours))
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


def recent_failures(db: Session, username: str, address: str) -> int:
    """Failed logins in the window for this account or from this address, whichever is more."""
    since = utcnow() - FAILURE_WINDOW
    by_user = db.scalar(select(func.count()).select_from(LoginFailure).where(
        LoginFailure.at >= since, LoginFailure.username == username)) or 0
    by_addr = db.scalar(select(func.count()).select_from(LoginFailure).where(
        LoginFailure.at >= since, LoginFailure.address == address)) or 0
    return max(by_user, by_addr)


def login_delay(failures: int, settings: Settings) -> float:
    """Seconds to wait before answering, growing with failures past the threshold."""
    over = failures - settings.login_delay_after + 1
    if over <= 0:
        return 0.0
    return min(MAX_LOGIN_DELAY, settings.login_delay_seconds * over)


def record_failure(db: Session, username: str, address: str) -> None:
    db.add(LoginFailure(username=username[:64], address=address[:64]))


def clear_failures(db: Session, username: str, address: str) -> None:
    db.execute(delete(LoginFailure).where(
        or_(LoginFailure.username == username, LoginFailure.address == address)))


def authenticate(db: Session, username: str, password: str) -> User | None:
    user = db.scalar(select(User).where(User.username == username))
    if user is None:
        # Spend the same time as a real check, so timing does not reveal which names exist.
        verify_password(_dummy_hash(), password)
        return None
    if not user.active or not verify_password(user.password_hash, password):
        return None
    return user


_DUMMY_HASHES: dict[str, str] = {}


def _dummy_hash() -> str:
    """A hash of a random password with the current parameters (made on first use)."""
    cost = get_settings().password_hash_cost
    if cost not in _DUMMY_HASHES:
        _DUMMY_HASHES[cost] = _HASHERS[cost].hash(secrets.token_urlsafe(16))
    return _DUMMY_HASHES[cost]
