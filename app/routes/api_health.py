"""GET /api/health: is the service up and can it reach its database."""

from __future__ import annotations

from fastapi import APIRouter
from pydantic import BaseModel

from app.db import dialect_name, schema_revision
from app.deps import SessionDep

router = APIRouter(tags=["health"])


class HealthPublic(BaseModel):
    status: str
    database: str
    schema_revision: str | None


@router.get("/api/health", response_model=HealthPublic)
def health(db: SessionDep) -> HealthPublic:
    return HealthPublic(status="ok", database=dialect_name(db), schema_revision=schema_revision(db))
