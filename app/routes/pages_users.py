"""The Users page (admins): create accounts, change roles, disable or enable, set passwords."""

from __future__ import annotations

from collections.abc import Callable

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.deps import Login, PageAdmin, SessionDep
from app.models import ROLES, User
from app.services import users as svc
from app.services.errors import ServiceError
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)

DONE = {
    "created": "The account was created.",
    "role": "The role was changed.",
    "disabled": "The account was disabled and its sessions ended.",
    "enabled": "The account was enabled.",
    "password": "The password was set; the account's sessions ended.",
}


def _page(
    request: Request,
    login: Login,
    db: SessionDep,
    *,
    status_code: int = 200,
    error: str | None = None,
    notice: str | None = None,
    form: dict[str, str] | None = None,
) -> HTMLResponse:
    return render(
        request,
        "users.html",
        login,
        status_code=status_code,
        nav="users",
        users=svc.list_users(db),
        roles=ROLES,
        error=error,
        notice=notice,
        form=form or {},
        min_password=svc.MIN_PASSWORD,
    )


@router.get("/users", response_class=HTMLResponse)
def users_page(
    request: Request, login: PageAdmin, db: SessionDep, done: str | None = None
) -> HTMLResponse:
    return _page(request, login, db, notice=DONE.get(done or ""))


@router.post("/users", response_class=HTMLResponse)
def users_create(
    request: Request,
    login: PageAdmin,
    db: SessionDep,
    username: str = Form(""),
    display_name: str = Form(""),
    role: str = Form("annotator"),
    password: str = Form(""),
) -> Response:
    try:
        svc.create_user(db, username, password, role, display_name=display_name, by=login.user)
    except ServiceError as err:
        return _page(
            request,
            login,
            db,
            status_code=err.status_code,
            error=str(err.detail),
            form={"username": username, "display_name": display_name, "role": role},
        )
    return RedirectResponse("/users?done=created", status_code=303)


def _change(
    request: Request,
    login: Login,
    db: SessionDep,
    user_id: int,
    done: str,
    action: Callable[[User], object],
) -> Response:
    try:
        action(svc.get_user(db, user_id))
    except ServiceError as err:
        return _page(request, login, db, status_code=err.status_code, error=str(err.detail))
    return RedirectResponse(f"/users?done={done}", status_code=303)


@router.post("/users/{user_id}/role", response_class=HTMLResponse)
def users_role(
    request: Request, user_id: int, login: PageAdmin, db: SessionDep, role: str = Form("")
) -> Response:
    return _change(
        request, login, db, user_id, "role", lambda u: svc.set_role(db, u, role, by=login.user)
    )


@router.post("/users/{user_id}/active", response_class=HTMLResponse)
def users_active(
    request: Request, user_id: int, login: PageAdmin, db: SessionDep, active: bool = Form(...)
) -> Response:
    return _change(
        request,
        login,
        db,
        user_id,
        "enabled" if active else "disabled",
        lambda u: svc.set_active(db, u, active, by=login.user),
    )


@router.post("/users/{user_id}/password", response_class=HTMLResponse)
def users_password(
    request: Request, user_id: int, login: PageAdmin, db: SessionDep, password: str = Form("")
) -> Response:
    return _change(
        request,
        login,
        db,
        user_id,
        "password",
        lambda u: svc.set_password(db, u, password, by=login.user),
    )
