"""GET /api/session: who is logged in, and the CSRF token their changes must carry."""

from __future__ import annotations

from fastapi import APIRouter
from pydantic import BaseModel

from app.deps import ApiUser

router = APIRouter(tags=["session"])


class SessionPublic(BaseModel):
    user_id: int
    username: str
    display_name: str
    role: str
    csrf_token: str


@router.get("/api/session", response_model=SessionPublic)
def current_session(login: ApiUser) -> SessionPublic:
    u = login.user
    return SessionPublic(
        user_id=u.id,
        username=u.username,
        display_name=u.display_name,
        role=u.role,
        csrf_token=login.csrf_token,
    )
