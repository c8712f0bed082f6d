"""reference sets of a corpus; each sentence's tree entropy per word for the queue order

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0007"
down_revision = "0006"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "reference_sets",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=128), nullable=False),
        sa.Column("source", sa.Text(), nullable=False),
        sa.Column("licence", sa.Text(), nullable=False),
        sa.Column("trees", sa.Text(), nullable=False),
        sa.Column("tree_count", sa.Integer(), nullable=False),
        sa.Column("word_count", sa.Integer(), nullable=False),
        sa.Column("in_use", sa.Boolean(), nullable=False),
        sa.Column("created_by", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["created_by"], ["users.id"], ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("corpus_id", "name"),
    )
    op.create_index(
        op.f("ix_reference_sets_corpus_id"), "reference_sets", ["corpus_id"], unique=False
    )
    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.add_column(sa.Column("entropy_per_word", sa.Float(), nullable=True))
        batch_op.add_column(sa.Column("entropy_grammar_id", sa.Integer(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.drop_column("entropy_grammar_id")
        batch_op.drop_column("entropy_per_word")
    op.drop_index(op.f("ix_reference_sets_corpus_id"), table_name="reference_sets")
    op.drop_table("reference_sets")
