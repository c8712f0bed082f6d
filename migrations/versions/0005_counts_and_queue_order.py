"""pages that cost one page: sentence counts per document and state, the queue's order on the
assignment rows, reading-order indexes on sentences

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "sentence_counts",
        sa.Column("document_id", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=16), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("n", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["document_id"], ["documents.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("document_id", "state"),
    )
    with op.batch_alter_table("sentence_counts", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_sentence_counts_corpus_id"), ["corpus_id"], unique=False
        )
    # The rows are counted (and the triggers that keep them made) by app.counts at start.

    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.drop_index("ix_sentences_corpus_state")
        batch_op.create_index(
            "ix_sentences_corpus_order", ["corpus_id", "document_id", "position"], unique=False
        )
        batch_op.create_index(
            "ix_sentences_corpus_state_order",
            ["corpus_id", "state", "document_id", "position"],
            unique=False,
        )

    with op.batch_alter_table("annotations", schema=None) as batch_op:
        batch_op.create_index("ix_annotations_user_state", ["user_id", "state"], unique=False)

    with op.batch_alter_table("assignments", schema=None) as batch_op:
        batch_op.add_column(sa.Column("corpus_id", sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column("rank", sa.BigInteger(), nullable=True))
    # reading order: (document id << 32) + position, as app.models.reading_rank
    op.execute(
        "UPDATE assignments SET "
        "corpus_id = (SELECT s.corpus_id FROM sentences s "
        "WHERE s.id = assignments.sentence_id), "
        "rank = (SELECT s.document_id * 4294967296 + s.position FROM sentences s "
        "WHERE s.id = assignments.sentence_id)"
    )
    with op.batch_alter_table("assignments", schema=None) as batch_op:
        batch_op.alter_column("corpus_id", existing_type=sa.Integer(), nullable=False)
        batch_op.alter_column("rank", existing_type=sa.BigInteger(), nullable=False)
        batch_op.create_foreign_key(
            "fk_assignments_corpus_id", "corpora", ["corpus_id"], ["id"], ondelete="CASCADE"
        )
        batch_op.create_index(
            "ix_assignments_queue", ["user_id", "corpus_id", "rank", "sentence_id"], unique=False
        )


def downgrade() -> None:
    from app.counts import drop_triggers

    drop_triggers(op.get_bind())
    with op.batch_alter_table("assignments", schema=None) as batch_op:
        batch_op.drop_index("ix_assignments_queue")
        batch_op.drop_constraint("fk_assignments_corpus_id", type_="foreignkey")
        batch_op.drop_column("rank")
        batch_op.drop_column("corpus_id")
    with op.batch_alter_table("annotations", schema=None) as batch_op:
        batch_op.drop_index("ix_annotations_user_state")
    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.drop_index("ix_sentences_corpus_state_order")
        batch_op.drop_index("ix_sentences_corpus_order")
        batch_op.create_index("ix_sentences_corpus_state", ["corpus_id", "state"], unique=False)
    with op.batch_alter_table("sentence_counts", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_sentence_counts_corpus_id"))
    op.drop_table("sentence_counts")
