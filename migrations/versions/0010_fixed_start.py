"""sentences and annotations: the fixed start suggestion

Revision ID: 0010
Revises: 0009
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0010"
down_revision = "0009"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # All nullable: sentences nobody has opened have no fixed start yet, and annotations
    # made before this revision did not record theirs.
    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.add_column(sa.Column("start_kind", sa.String(length=16), nullable=True))
        batch_op.add_column(sa.Column("start_grammar_version_id", sa.Integer(), nullable=True))
        batch_op.create_foreign_key(
            "fk_sentences_start_grammar_version_id",
            "grammar_versions",
            ["start_grammar_version_id"],
            ["id"],
            ondelete="SET NULL",
        )
    with op.batch_alter_table("annotations", schema=None) as batch_op:
        batch_op.add_column(sa.Column("start_kind", sa.String(length=16), nullable=True))
        batch_op.add_column(sa.Column("start_grammar_version_id", sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column("start_suggestion_id", sa.Integer(), nullable=True))
        batch_op.create_foreign_key(
            "fk_annotations_start_grammar_version_id",
            "grammar_versions",
            ["start_grammar_version_id"],
            ["id"],
            ondelete="SET NULL",
        )
        batch_op.create_foreign_key(
            "fk_annotations_start_suggestion_id",
            "suggestions",
            ["start_suggestion_id"],
            ["id"],
            ondelete="SET NULL",
        )


def downgrade() -> None:
    with op.batch_alter_table("annotations", schema=None) as batch_op:
        batch_op.drop_constraint("fk_annotations_start_suggestion_id", type_="foreignkey")
        batch_op.drop_constraint("fk_annotations_start_grammar_version_id", type_="foreignkey")
        batch_op.drop_column("start_suggestion_id")
        batch_op.drop_column("start_grammar_version_id")
        batch_op.drop_column("start_kind")
    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.drop_constraint("fk_sentences_start_grammar_version_id", type_="foreignkey")
        batch_op.drop_column("start_grammar_version_id")
        batch_op.drop_column("start_kind")
