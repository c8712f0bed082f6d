"""Shapes shared by every JSON API module: UTC timestamps, strict request bodies and the
generic error body.

The database keeps naive UTC datetimes (``app.models.utcnow``). Sent as they are, they would
carry no offset, which is not an RFC 3339 ``date-time`` and which a browser reads as *local*
time. :data:`UtcDateTime` marks a naive value as UTC, so the JSON says ``...+00:00``.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Annotated, Any

from pydantic import AfterValidator, BaseModel, ConfigDict


def _as_utc(value: datetime) -> datetime:
    return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)


#: A timestamp sent with its UTC offset; use it for every datetime in a response model.
UtcDateTime = Annotated[datetime, AfterValidator(_as_utc)]


class RequestModel(BaseModel):
    """Base of every request body (XCreate, XUpdate...): a field the model does not know is a
    422 naming it, so a misspelt field is not silently ignored. Numbers must be finite (NaN
    and infinity are refused everywhere: a NaN bound compares false with everything and
    would quietly turn a check off)."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


class ErrorPublic(BaseModel):
    """Any refused request: ``detail`` says what and where (a list of field errors for a body
    or parameter that does not fit the schema); some answers add fields of their own."""

    detail: Any
