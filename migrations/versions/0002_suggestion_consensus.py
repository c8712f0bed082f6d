"""suggestions: the consensus tree

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # Nullable: rows written before this revision, rows without posteriors and fallbacks
    # have no consensus tree.
    with op.batch_alter_table("suggestions", schema=None) as batch_op:
        batch_op.add_column(sa.Column("consensus", sa.Text(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("suggestions", schema=None) as batch_op:
        batch_op.drop_column("consensus")
