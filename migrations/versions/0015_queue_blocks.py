"""queue_blocks: each user's assignments per corpus and block of queue ranks

Revision ID: 0015
Revises: 0014
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0015"
down_revision = "0014"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # Filled (and kept) by the triggers of app.counts, installed and recounted at start.
    # No foreign keys: a removed user's or corpus's assignments take their counts to zero.
    op.create_table(
        "queue_blocks",
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("block", sa.BigInteger(), nullable=False),
        sa.Column("n", sa.Integer(), nullable=False),
        sa.PrimaryKeyConstraint("user_id", "corpus_id", "block"),
    )


def downgrade() -> None:
    from app.counts import drop_block_triggers

    drop_block_triggers(op.get_bind())
    op.drop_table("queue_blocks")
