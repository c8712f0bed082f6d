"""effort_shares: each handed-in annotation's share of the effort table, with its fingerprint

Revision ID: 0019
Revises: 0018
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0019"
down_revision = "0018"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # Written by the Agreement page's views (app.services.effort); empty costs one
    # computation of every share at the next view.
    op.create_table(
        "effort_shares",
        sa.Column("annotation_id", sa.Integer(), nullable=False),
        sa.Column("fingerprint", sa.String(length=80), nullable=False),
        sa.Column("share", sa.JSON(), nullable=True),
        sa.ForeignKeyConstraint(["annotation_id"], ["annotations.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("annotation_id"),
    )


def downgrade() -> None:
    op.drop_table("effort_shares")
