"""JSON API for accounts (admins only): list, create, change role, activity or password."""

from __future__ import annotations

from typing import Literal

from fastapi import APIRouter
from pydantic import BaseModel, Field

from app.deps import ApiAdmin, SessionDep
from app.models import User
from app.routes.api_corpora import ERRORS
from app.schemas.common import RequestModel, UtcDateTime
from app.services import users as svc

router = APIRouter(tags=["users"])

Role = Literal["admin", "adjudicator", "annotator"]


class UserPublic(BaseModel):
    id: int
    username: str
    display_name: str
    role: str
    active: bool
    created_at: UtcDateTime


class UserCreate(RequestModel):
    username: str = Field(min_length=1, max_length=64)
    password: str = Field(min_length=1, max_length=1024)
    role: Role = "annotator"
    display_name: str = Field("", max_length=128)


class UserUpdate(RequestModel):
    role: Role | None = None
    active: bool | None = None
    password: str | None = Field(None, min_length=1, max_length=1024)


def _public(user: User) -> UserPublic:
    return UserPublic(
        id=user.id,
        username=user.username,
        display_name=user.display_name,
        role=user.role,
        active=user.active,
        created_at=user.created_at,
    )


@router.get("/api/users", response_model=list[UserPublic], responses=ERRORS)
def list_users(login: ApiAdmin, db: SessionDep) -> list[UserPublic]:
    return [_public(u) for u in svc.list_users(db)]


@router.post("/api/users", response_model=UserPublic, status_code=201, responses=ERRORS)
def create_user(body: UserCreate, login: ApiAdmin, db: SessionDep) -> UserPublic:
    user = svc.create_user(
        db, body.username, body.password, body.role, display_name=body.display_name, by=login.user
    )
    return _public(user)


@router.patch("/api/users/{user_id}", response_model=UserPublic, responses=ERRORS)
def update_user(user_id: int, body: UserUpdate, login: ApiAdmin, db: SessionDep) -> UserPublic:
    """Change role, active state and/or password; disabling or a new password ends sessions."""
    user = svc.update_user(
        db,
        svc.get_user(db, user_id),
        role=body.role,
        active=body.active,
        password=body.password,
        by=login.user,
    )
    return _public(user)
