"""Template rendering shared by every page: the logged-in user, the CSRF token, the nav, and
two filters every page may use: ``as_written`` (a sentence's words as a person wrote them:
``-LRB-`` shown as ``(``; the escapes belong to bracketed text only) and ``plural``
(``3|plural("sentence")`` gives "3 sentences", ``1|plural("pair")`` "1 pair")."""

from __future__ import annotations

from typing import Any

from fastapi import Request
from fastapi.responses import HTMLResponse
from fastapi.templating import Jinja2Templates

from app.deps import Login
from app.settings import TEMPLATES_DIR
from app.wording import as_written, plural

templates = Jinja2Templates(directory=str(TEMPLATES_DIR))
templates.env.filters["as_written"] = as_written
templates.env.filters["plural"] = plural


def render(
    request: Request, name: str, login: Login | None, status_code: int = 200, **context: Any
) -> HTMLResponse:
    """Render ``templates/name`` with ``user``, ``csrf_token`` and the given context."""
    context.update(user=login.user if login else None, csrf_token=login.csrf_token if login else "")
    return templates.TemplateResponse(request, name, context, status_code=status_code)
