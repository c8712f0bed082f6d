"""figure_mark_shards: the figures' change marks in rows per corpus and writer shard

Revision ID: 0018
Revises: 0017
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0018"
down_revision = "0017"
branch_labels = None
depends_on = None


def _marks_table(name: str, *key: str) -> None:
    columns = [sa.Column(k, sa.Integer(), nullable=False) for k in key]
    op.create_table(
        name,
        *columns,
        sa.Column("agreement_records", sa.Integer(), nullable=False),
        sa.Column("agreement_changes", sa.Integer(), nullable=False),
        sa.Column("handed_in_changes", sa.Integer(), nullable=False),
        *(
            [sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE")]
            if len(key) == 1
            else []
        ),
        sa.PrimaryKeyConstraint(*key),
    )


def upgrade() -> None:
    # The rows are filled (and kept) by the triggers of app.counts, which the app installs
    # and recounts at start (the stored sums, made against the old marks, go then too).
    from app.counts import drop_single_mark_triggers

    drop_single_mark_triggers(op.get_bind())
    op.drop_table("figure_marks")
    _marks_table("figure_mark_shards", "corpus_id", "shard")


def downgrade() -> None:
    from app.counts import drop_mark_triggers

    drop_mark_triggers(op.get_bind())
    op.drop_table("figure_mark_shards")
    _marks_table("figure_marks", "corpus_id")
    op.execute("DELETE FROM kept_sums")
