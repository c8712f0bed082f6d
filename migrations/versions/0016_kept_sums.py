"""kept_sums: a corpus's Agreement page sums kept in the database, with the mark they are at

Revision ID: 0016
Revises: 0015
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0016"
down_revision = "0015"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # Written by the Agreement page's views (app.services.agreement, app.services.effort);
    # an empty table costs one full sum at the next view.
    op.create_table(
        "kept_sums",
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=16), nullable=False),
        sa.Column("changes", sa.Integer(), nullable=False),
        sa.Column("seen", sa.Integer(), nullable=False),
        sa.Column("last_id", sa.Integer(), nullable=False),
        sa.Column("sums", sa.JSON(), nullable=False),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("corpus_id", "kind"),
    )


def downgrade() -> None:
    op.drop_table("kept_sums")
