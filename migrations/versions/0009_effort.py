"""time on task: the active seconds and the edit actions measured by the Bench with each
revision, and the tree an annotation started from

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0009"
down_revision = "0008"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("revisions", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column("active_seconds", sa.Float(), server_default="0", nullable=False)
        )
        batch_op.add_column(
            sa.Column("actions", sa.JSON(), server_default=sa.text("'{}'"), nullable=False)
        )
    with op.batch_alter_table("annotations", schema=None) as batch_op:
        batch_op.add_column(sa.Column("start_tree", sa.Text(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("annotations", schema=None) as batch_op:
        batch_op.drop_column("start_tree")
    with op.batch_alter_table("revisions", schema=None) as batch_op:
        batch_op.drop_column("actions")
        batch_op.drop_column("active_seconds")
