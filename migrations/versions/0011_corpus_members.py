"""corpus_members: the users an admin names members of a corpus

Revision ID: 0011
Revises: 0010
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0011"
down_revision = "0010"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # A new table: no existing row changes meaning (membership by assignment goes on as it was).
    op.create_table(
        "corpus_members",
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("added_at", sa.DateTime(), nullable=False),
        sa.Column("added_by_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["user_id"], ["users.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["added_by_id"], ["users.id"], ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("corpus_id", "user_id"),
    )
    op.create_index("ix_corpus_members_user_id", "corpus_members", ["user_id"])


def downgrade() -> None:
    op.drop_index("ix_corpus_members_user_id", table_name="corpus_members")
    op.drop_table("corpus_members")
