"""Request dependencies, written once: database session, current user, roles, CSRF, look-ups.

Pages and the JSON API differ only in how a missing login is answered: the API says 401, a
page redirects to the login form. Every state-changing request (POST, PUT, PATCH, DELETE) must
carry the session's CSRF token in the ``X-CSRF-Token`` header or a ``csrf_token`` form field.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable, Iterator
from dataclasses import dataclass
from typing import Annotated

from fastapi import Depends, HTTPException, Request
from sqlalchemy.orm import Session
from starlette.datastructures import FormData

from app.api_errors import AUTH_DEPENDENCY_MARK
from app.models import ROLE_ADJUDICATOR, ROLE_ADMIN, ROLES, Corpus, User, UserSession
from app.security import CSRF_FIELD, CSRF_HEADER, SESSION_COOKIE, csrf_ok, find_session
from app.settings import Settings

SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})


class LoginRequired(Exception):
    """Raised by page dependencies; the app turns it into a redirect to the login form."""

    def __init__(self, next_url: str) -> None:
        self.next_url = next_url


def get_settings_dep(request: Request) -> Settings:
    settings: Settings = request.app.state.settings
    return settings


def get_db(request: Request) -> Iterator[Session]:
    db: Session = request.app.state.sessionmaker()
    try:
        yield db
    finally:
        db.close()


async def posted_form(request: Request) -> FormData:
    """The request's form, read on the event loop, so the handler itself can be a plain def
    (run in a worker thread) even when its fields are only known at run time."""
    return await request.form()


SettingsDep = Annotated[Settings, Depends(get_settings_dep)]
SessionDep = Annotated[Session, Depends(get_db)]
PostedForm = Annotated[FormData, Depends(posted_form)]


@dataclass
class Login:
    """The authenticated user of a request and their session (with its CSRF token)."""

    user: User
    session: UserSession

    @property
    def csrf_token(self) -> str:
        return self.session.csrf_token


def optional_login(request: Request, db: SessionDep) -> Login | None:
    sess = find_session(db, request.cookies.get(SESSION_COOKIE))
    if sess is None:
        return None
    return Login(user=sess.user, session=sess)


OptionalLogin = Annotated[Login | None, Depends(optional_login)]


async def _check_csrf(request: Request, login: Login) -> None:
    if request.method in SAFE_METHODS:
        return
    supplied = request.headers.get(CSRF_HEADER)
    if not supplied:
        ctype = request.headers.get("content-type", "")
        if ctype.startswith(("application/x-www-form-urlencoded", "multipart/form-data")):
            form = await request.form()
            value = form.get(CSRF_FIELD)
            supplied = value if isinstance(value, str) else None
    if not csrf_ok(login.session, supplied):
        raise HTTPException(status_code=403, detail="missing or wrong CSRF token")


def _rank(role: str) -> int:
    return len(ROLES) - ROLES.index(role) if role in ROLES else 0


def api_login(minimum_role: str | None = None) -> Callable[..., Awaitable[Login]]:
    """Dependency factory for the JSON API: 401 without login, 403 below ``minimum_role``."""

    async def dep(request: Request, login: OptionalLogin) -> Login:
        if login is None:
            raise HTTPException(status_code=401, detail="login required")
        await _check_csrf(request, login)
        if minimum_role and _rank(login.user.role) < _rank(minimum_role):
            raise HTTPException(status_code=403, detail=f"requires the {minimum_role} role")
        return login

    setattr(dep, AUTH_DEPENDENCY_MARK, True)  # the OpenAPI document lists its 401 and 403
    return dep


def page_login(minimum_role: str | None = None) -> Callable[..., Awaitable[Login]]:
    """Dependency factory for pages: redirect to login without one, 403 below the role."""

    async def dep(request: Request, login: OptionalLogin) -> Login:
        if login is None:
            nxt = request.url.path + (f"?{request.url.query}" if request.url.query else "")
            raise LoginRequired(nxt)
        await _check_csrf(request, login)
        if minimum_role and _rank(login.user.role) < _rank(minimum_role):
            raise HTTPException(status_code=403, detail=f"requires the {minimum_role} role")
        return login

    return dep


ApiUser = Annotated[Login, Depends(api_login())]
ApiAdjudicator = Annotated[Login, Depends(api_login(ROLE_ADJUDICATOR))]
ApiAdmin = Annotated[Login, Depends(api_login(ROLE_ADMIN))]
PageUser = Annotated[Login, Depends(page_login())]
PageAdjudicator = Annotated[Login, Depends(page_login(ROLE_ADJUDICATOR))]
PageAdmin = Annotated[Login, Depends(page_login(ROLE_ADMIN))]


def corpus_or_404(db: Session, corpus_id: int) -> Corpus:
    corpus = db.get(Corpus, corpus_id)
    if corpus is None:
        raise HTTPException(status_code=404, detail=f"no corpus with id {corpus_id}")
    return corpus


def get_corpus(corpus_id: int, db: SessionDep) -> Corpus:
    return corpus_or_404(db, corpus_id)


CorpusDep = Annotated[Corpus, Depends(get_corpus)]
