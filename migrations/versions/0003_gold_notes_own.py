"""gold: the annotators' notes it was made with, and whether the adjudicator annotated

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # Gold written before this revision: no notes were kept with it, and nobody knows whether
    # its adjudicator annotated the sentence; record the plain defaults.
    with op.batch_alter_table("gold", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column("annotator_notes", sa.JSON(), nullable=False, server_default=sa.text("'[]'"))
        )
        batch_op.add_column(
            sa.Column("own_annotation", sa.Boolean(), nullable=False, server_default=sa.false())
        )


def downgrade() -> None:
    with op.batch_alter_table("gold", schema=None) as batch_op:
        batch_op.drop_column("own_annotation")
        batch_op.drop_column("annotator_notes")
