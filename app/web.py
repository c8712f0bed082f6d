"""Template rendering shared by every page: the logged-in user, the CSRF token, the nav."""

from __future__ import annotations

from typing import Any

from fastapi import Request
from fastapi.responses import HTMLResponse
from fastapi.templating import Jinja2Templates

from app.deps import Login
from app.settings import TEMPLATES_DIR

templates = Jinja2Templates(directory=str(TEMPLATES_DIR))


def render(request: Request, name: str, login: Login | None, status_code: int = 200,
           **context: Any) -> HTMLResponse:
    """Render ``templates/name`` with ``user``, ``csrf_token`` and the given context."""
    context.update(user=login.user if login else None,
                   csrf_token=login.csrf_token if login else "")
    return templates.TemplateResponse(request, name, context, status_code=status_code)
