"""figure_marks: per corpus, change marks that tell the Agreement page's kept sums are current

Revision ID: 0014
Revises: 0013
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0014"
down_revision = "0013"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # The rows are filled (and kept) by the triggers of app.counts, which the app installs
    # and recounts at start when they are missing.
    op.create_table(
        "figure_marks",
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("agreement_records", sa.Integer(), nullable=False),
        sa.Column("agreement_changes", sa.Integer(), nullable=False),
        sa.Column("handed_in_changes", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("corpus_id"),
    )


def downgrade() -> None:
    from app.counts import drop_single_mark_triggers

    drop_single_mark_triggers(op.get_bind())
    op.drop_table("figure_marks")
