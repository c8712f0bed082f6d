"""Errors raised by services; the app turns each into an HTTP answer with its status code."""

from __future__ import annotations

from typing import Any


class ServiceError(Exception):
    status_code = 400

    def __init__(self, detail: Any, **extra: Any) -> None:
        super().__init__(detail if isinstance(detail, str) else repr(detail))
        self.detail = detail
        self.extra = extra


class BadInput(ServiceError):
    status_code = 422


class Forbidden(ServiceError):
    status_code = 403


class NotFound(ServiceError):
    status_code = 404


class Conflict(ServiceError):
    """A stale or racing write; ``extra`` carries what the client needs (the current head)."""

    status_code = 409
