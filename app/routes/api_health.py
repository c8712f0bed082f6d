"""GET /api/health: is the service up and can it reach its database."""

from __future__ import annotations

from fastapi import APIRouter
from pydantic import BaseModel
from sqlalchemy import text

from app.deps import SessionDep

router = APIRouter(tags=["health"])


class HealthPublic(BaseModel):
    status: str
    database: str
    schema_revision: str | None


@router.get("/api/health", response_model=HealthPublic)
def health(db: SessionDep) -> HealthPublic:
    revision = db.execute(text("SELECT version_num FROM alembic_version")).scalar()
    return HealthPublic(status="ok", database=db.get_bind().dialect.name,
                        schema_revision=revision)
