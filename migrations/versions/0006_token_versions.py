"""token fixes: earlier versions of a sentence's tokens, and the version each sentence and
each revision is on

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0006"
down_revision = "0005"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "token_versions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sentence_id", sa.Integer(), nullable=False),
        sa.Column("number", sa.Integer(), nullable=False),
        sa.Column("tokens", sa.JSON(), nullable=False),
        sa.Column("text", sa.Text(), nullable=False),
        sa.Column("change", sa.JSON(), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["sentence_id"], ["sentences.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["user_id"], ["users.id"], ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("sentence_id", "number"),
    )
    with op.batch_alter_table("token_versions", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_token_versions_sentence_id"), ["sentence_id"], unique=False
        )
    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column("token_version", sa.Integer(), server_default="1", nullable=False)
        )
    with op.batch_alter_table("revisions", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column("token_version", sa.Integer(), server_default="1", nullable=False)
        )


def downgrade() -> None:
    with op.batch_alter_table("revisions", schema=None) as batch_op:
        batch_op.drop_column("token_version")
    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.drop_column("token_version")
    with op.batch_alter_table("token_versions", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_token_versions_sentence_id"))
    op.drop_table("token_versions")
