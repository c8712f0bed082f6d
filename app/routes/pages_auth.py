"""Login and logout pages."""

from __future__ import annotations

import asyncio

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from starlette.concurrency import run_in_threadpool

from app.deps import OptionalLogin, PageUser, SessionDep, SettingsDep
from app.security import SESSION_COOKIE, check_password_off_loop
from app.services import logins
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)


def _safe_next(nxt: str | None) -> str:
    # Only same-site paths: never redirect to another host after login.
    if nxt and nxt.startswith("/") and not nxt.startswith("//") and "\\" not in nxt:
        return nxt
    return "/"


@router.get("/login", response_class=HTMLResponse)
def login_form(request: Request, login: OptionalLogin, next: str | None = None) -> Response:
    if login is not None:
        return RedirectResponse(_safe_next(next), status_code=303)
    return render(request, "login.html", None, next=_safe_next(next), error=None)


def _posted_from_elsewhere(request: Request) -> bool:
    # The login form has no session (so no CSRF token) yet; a browser says where a form post
    # came from in Sec-Fetch-Site. Refusing other sites stops a page elsewhere from logging
    # the visitor in to an account of its choosing. Clients that send no such header (scripts,
    # older browsers) are not affected.
    return request.headers.get("sec-fetch-site", "same-origin") not in ("same-origin", "none")


@router.post("/login", response_class=HTMLResponse)
async def login_submit(
    request: Request,
    settings: SettingsDep,
    username: str = Form(""),
    password: str = Form(""),
    next: str = Form("/"),
) -> Response:
    # No database session lives across an await: the two database steps open and close their
    # own in a worker thread, so neither the failure delay nor the password check keeps a
    # pooled connection, and the event loop itself never waits for one.
    if _posted_from_elsewhere(request):
        return render(
            request,
            "login.html",
            None,
            status_code=403,
            next="/",
            error="This login form was sent from another site; log in here.",
        )
    factory = request.app.state.sessionmaker
    address = request.client.host if request.client else "unknown"
    username = username.strip()
    attempt = await run_in_threadpool(logins.look_up, factory, username, address, settings)
    if attempt.delay:
        await asyncio.sleep(attempt.delay)
    # argon2 is slow on purpose: its own few threads, a bounded number at once
    account = await check_password_off_loop(attempt.found, password)
    token = await run_in_threadpool(logins.finish, factory, account, username, address, settings)
    if token is None:
        return render(
            request,
            "login.html",
            None,
            status_code=401,
            next=_safe_next(next),
            error="That user name and password do not match an active account.",
        )
    response = RedirectResponse(_safe_next(next), status_code=303)
    response.set_cookie(
        SESSION_COOKIE,
        token,
        httponly=True,
        samesite="strict",
        secure=settings.cookie_secure,
        max_age=settings.session_hours * 3600,
        path="/",
    )
    return response


@router.post("/logout")
def logout(request: Request, login: PageUser, db: SessionDep) -> Response:
    logins.log_out(db, login.user, request.cookies.get(SESSION_COOKIE))
    response = RedirectResponse("/login", status_code=303)
    response.delete_cookie(SESSION_COOKIE, path="/")
    return response
