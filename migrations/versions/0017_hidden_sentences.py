"""hidden_sentences: per user and corpus, the sentences with records the user still annotates

Revision ID: 0017
Revises: 0016
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0017"
down_revision = "0016"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # Filled (and kept) by the triggers of app.counts, installed and recounted at start.
    # No foreign keys: the triggers remove a row when its records or its work go.
    op.create_table(
        "hidden_sentences",
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("sentence_id", sa.Integer(), nullable=False),
        sa.PrimaryKeyConstraint("user_id", "corpus_id", "sentence_id"),
    )
    op.create_index("ix_hidden_sentences_sentence", "hidden_sentences", ["sentence_id"])


def downgrade() -> None:
    from app.counts import drop_hidden_triggers

    drop_hidden_triggers(op.get_bind())
    op.drop_index("ix_hidden_sentences_sentence", table_name="hidden_sentences")
    op.drop_table("hidden_sentences")
