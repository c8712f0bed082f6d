"""The application factory: settings -> migrated database -> FastAPI app with every router.

Routers are found, not listed: each module in ``app/routes`` that defines ``router`` is
included, so adding a page or API module needs no edit here.
"""

from __future__ import annotations

import importlib
import logging
import pkgutil
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import Any
from urllib.parse import quote

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, RedirectResponse
from fastapi.staticfiles import StaticFiles
from sqlalchemy.exc import DataError, OperationalError, SQLAlchemyError
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

import app.routes
from app.api_errors import (
    SharedErrorDocs,
    busy_answer,
    is_lock_timeout,
    refusal_answer,
    value_out_of_range,
)
from app.db import make_engine, make_sessionmaker, upgrade_to_head
from app.deps import LoginRequired
from app.services import admission, staged_import, suggestions, training
from app.services.errors import ServiceError
from app.settings import STATIC_DIR, Settings, get_settings
from parser.errors import ParserError

log = logging.getLogger(__name__)

CSP = (
    "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
    "connect-src 'self'; font-src 'self'; object-src 'none'; base-uri 'none'; "
    "form-action 'self'; frame-ancestors 'none'"
)
# FastAPI's interactive docs pages (/docs, /redoc) are switched off: they load their scripts
# and fonts from CDNs into this origin and need inline script. The OpenAPI document itself is
# at /openapi.json for any viewer or client generator.


class SecurityHeaders:
    """Adds CSP, nosniff, frame and referrer headers to every response."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = list(message.get("headers", []))
                headers.append((b"content-security-policy", CSP.encode()))
                headers.append((b"x-content-type-options", b"nosniff"))
                headers.append((b"x-frame-options", b"DENY"))
                headers.append((b"referrer-policy", b"same-origin"))
                message["headers"] = headers
            await send(message)

        await self.app(scope, receive, send_with_headers)


class BodySizeLimit:
    """Answers 413 when a request body is larger than the configured limit."""

    def __init__(self, app: ASGIApp, limit: int) -> None:
        self.app = app
        self.limit = limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        for name, value in scope.get("headers", []):
            if name == b"content-length" and value.isdigit() and int(value) > self.limit:
                await _too_large(send, self.limit)
                return
        seen = 0
        refused = False
        started = False

        async def limited_receive() -> Message:
            nonlocal seen, refused
            if refused:
                return {"type": "http.disconnect"}
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    refused = True
                    raise _BodyTooLarge
            return message

        async def guarded_send(message: Message) -> None:
            # The app may turn the cut-off body into an answer of its own (FastAPI says 400
            # "error parsing the body"); once the limit is passed the answer is 413.
            nonlocal started
            if refused:
                if not started:
                    started = True
                    await _too_large(send, self.limit)
                return
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, limited_receive, guarded_send)
        except Exception:
            if not refused:
                raise
            if not started:
                await _too_large(send, self.limit)


class _BodyTooLarge(Exception):
    pass


async def _too_large(send: Send, limit: int) -> None:
    body = b'{"detail":"request body larger than the limit of %d bytes"}' % limit
    await send(
        {
            "type": "http.response.start",
            "status": 413,
            "headers": [
                (b"content-type", b"application/json"),
                (b"content-length", str(len(body)).encode()),
            ],
        }
    )
    await send({"type": "http.response.body", "body": body})


def _include_routers(application: FastAPI) -> None:
    docs = SharedErrorDocs()
    for info in sorted(pkgutil.iter_modules(app.routes.__path__), key=lambda m: m.name):
        module = importlib.import_module(f"app.routes.{info.name}")
        router = getattr(module, "router", None)
        if router is not None:
            docs.collect(router)
            application.include_router(router)
    docs.install(application)


def _error_page(request: Request, status: int, detail: Any) -> Any:
    """The error page for a browser asking for a page; None for the JSON API and clients."""
    accepts_html = "text/html" in request.headers.get("accept", "")
    if not accepts_html or request.url.path.startswith("/api/"):
        return None
    from app.web import templates

    return templates.TemplateResponse(
        request,
        "error.html",
        {"status": status, "detail": detail, "user": None, "csrf_token": ""},
        status_code=status,
    )


@asynccontextmanager
async def _startup_hooks(application: FastAPI) -> AsyncIterator[None]:
    """What runs when the service starts and stops, in this order: load the parser's compiled
    loops and the active grammars (so the first Bench request does not pay for them), start
    the training runner (it picks up jobs queued while the service was down); at the end stop
    the runner."""
    try:
        loaded = await run_in_threadpool(suggestions.warm_up, application.state.sessionmaker)
        log.info("warmed the parser; grammar versions loaded: %s", loaded)
    except (SQLAlchemyError, ParserError) as exc:  # the first Bench request pays instead
        log.warning("could not warm the parser: %s", exc)
    with application.state.sessionmaker() as db:
        dropped = await run_in_threadpool(staged_import.drop_abandoned_staging, db)
        if dropped:
            log.warning("removed %s import(s) a stopped process left half staged", dropped)
    runner = training.get_runner(application.state)
    yield
    runner.shutdown(wait=False)


def create_app(settings: Settings | None = None, *, migrate: bool = True) -> FastAPI:
    """Build the service for ``settings`` (default: from the environment)."""
    settings = settings or get_settings()
    if settings.job_runner == "workers" and settings.is_sqlite:
        raise ValueError(
            "TREEWRIGHT_JOB_RUNNER=workers needs PostgreSQL (TREEWRIGHT_DATABASE_URL="
            "postgresql+psycopg://user@host/dbname); on SQLite leave it at in_process"
        )
    if migrate:
        upgrade_to_head(settings)
    settings.resolved_secret_key()  # create the key file on first run
    engine = make_engine(settings)
    application = FastAPI(
        title="Treewright",
        docs_url=None,
        redoc_url=None,
        lifespan=_startup_hooks,
        version="0.1.0",
        description="Build a constituency treebank with a parser in the loop. The JSON API "
        "below is what the pages use; it needs a login cookie and, for changes, "
        "the session's CSRF token in the X-CSRF-Token header.",
    )
    application.state.settings = settings
    admission.configure_from(settings)  # this process's parse pool (app.services.admission)
    application.state.engine = engine
    application.state.sessionmaker = make_sessionmaker(engine)
    application.mount("/static", StaticFiles(directory=str(STATIC_DIR)), name="static")
    _include_routers(application)

    @application.exception_handler(LoginRequired)
    async def _to_login(request: Request, exc: LoginRequired) -> RedirectResponse:
        return RedirectResponse(f"/login?next={quote(exc.next_url)}", status_code=303)

    @application.exception_handler(ServiceError)
    async def _service_error(request: Request, exc: ServiceError) -> Any:
        page = _error_page(request, exc.status_code, exc.detail)
        if page is not None:
            return page
        headers = (
            {"Retry-After": str(exc.extra["retry_after"])} if "retry_after" in exc.extra else None
        )
        return refusal_answer(
            request, {"detail": exc.detail, **exc.extra}, exc.status_code, headers
        )

    for too_big in (OverflowError, DataError):  # a number or text the database cannot hold
        application.add_exception_handler(too_big, value_out_of_range)

    @application.exception_handler(OperationalError)
    async def _busy(request: Request, exc: OperationalError) -> Any:
        if not is_lock_timeout(exc):
            log.error("database error on %s %s", request.method, request.url.path, exc_info=exc)
            return JSONResponse({"detail": "internal database error"}, status_code=500)
        page = _error_page(
            request, 503, "The database is busy; nothing was stored. Try again in a moment."
        )
        return page if page is not None else busy_answer(request)

    @application.exception_handler(RequestValidationError)
    async def _invalid(request: Request, exc: RequestValidationError) -> JSONResponse:
        errors: list[dict[str, Any]] = []
        for err in exc.errors():
            errors.append(
                {
                    "loc": list(err.get("loc", ())),
                    "msg": str(err.get("msg", "")),
                    "type": str(err.get("type", "")),
                }
            )
        return JSONResponse({"detail": errors}, status_code=422)

    @application.exception_handler(StarletteHTTPException)
    async def _http_error(request: Request, exc: StarletteHTTPException) -> Any:
        page = _error_page(request, exc.status_code, exc.detail)
        if page is not None:
            return page
        return JSONResponse(
            {"detail": exc.detail},
            status_code=exc.status_code,
            headers=getattr(exc, "headers", None),
        )

    application.add_middleware(BodySizeLimit, limit=settings.max_upload_bytes)
    application.add_middleware(SecurityHeaders)
    return application
