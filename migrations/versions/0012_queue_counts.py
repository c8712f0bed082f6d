"""queue_counts: each user's assigned, submitted and dropped sentences per corpus

Revision ID: 0012
Revises: 0011
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0012"
down_revision = "0011"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # The rows are filled (and kept) by the triggers of app.counts, which the app installs
    # and recounts at start when they are missing.
    op.create_table(
        "queue_counts",
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("assigned", sa.Integer(), nullable=False),
        sa.Column("submitted", sa.Integer(), nullable=False),
        sa.Column("dropped", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["user_id"], ["users.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("user_id", "corpus_id"),
    )
    op.create_index("ix_queue_counts_corpus_id", "queue_counts", ["corpus_id"])


def downgrade() -> None:
    from app.counts import drop_queue_triggers

    drop_queue_triggers(op.get_bind())
    op.drop_index("ix_queue_counts_corpus_id", table_name="queue_counts")
    op.drop_table("queue_counts")
