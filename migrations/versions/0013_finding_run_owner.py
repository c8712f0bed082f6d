"""a findings run's owner: the process and host that run it and its heartbeat

Revision ID: 0013
Revises: 0012
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0013"
down_revision = "0012"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("finding_runs", schema=None) as batch_op:
        batch_op.add_column(sa.Column("owner_host", sa.String(length=255), nullable=True))
        batch_op.add_column(sa.Column("owner_pid", sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column("heartbeat_at", sa.DateTime(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("finding_runs", schema=None) as batch_op:
        batch_op.drop_column("heartbeat_at")
        batch_op.drop_column("owner_pid")
        batch_op.drop_column("owner_host")
