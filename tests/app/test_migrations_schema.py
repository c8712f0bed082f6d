"""The migrations build exactly the schema the models describe, and step down and up again."""

from __future__ import annotations

from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from sqlalchemy import create_engine, inspect

from app.db import alembic_config, is_own_schema_name
from app.models import Base
from app.settings import Settings


def _differences(url: str) -> list:
    engine = create_engine(url)
    try:
        with engine.connect() as conn:
            ctx = MigrationContext.configure(
                conn, opts={"compare_type": True, "include_name": is_own_schema_name}
            )
            return compare_metadata(ctx, Base.metadata)
    finally:
        engine.dispose()


def test_migrated_database_matches_the_models(settings: Settings) -> None:
    # Common practice, no source: autogenerate against a database migrated to head finds
    # nothing to do when every model change has its migration. The job queue's own tables
    # (PostgreSQL with workers) are left out, as the migrations' environment leaves them out.
    assert _differences(settings.resolved_database_url) == []


def test_latest_migration_steps_down_and_up(settings: Settings) -> None:
    cfg = alembic_config(settings)
    command.downgrade(cfg, "0018")
    engine = create_engine(settings.resolved_database_url)
    try:
        inspector = inspect(engine)
        tables = set(inspector.get_table_names())
    finally:
        engine.dispose()
    assert "figure_mark_shards" in tables and "effort_shares" not in tables
    command.upgrade(cfg, "head")
    assert _differences(settings.resolved_database_url) == []
