"""initial schema

Revision ID: 0001
Revises:
Create Date: 2026-12-01
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "corpora",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=128), nullable=False),
        sa.Column("description", sa.Text(), nullable=False),
        sa.Column("label_set", sa.JSON(), nullable=False),
        sa.Column("tag_set", sa.JSON(), nullable=False),
        sa.Column("settings", sa.JSON(), nullable=False),
        sa.Column("active_grammar_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("name"),
    )
    op.create_table(
        "login_failures",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("username", sa.String(length=64), nullable=False),
        sa.Column("address", sa.String(length=64), nullable=False),
        sa.Column("at", sa.DateTime(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("login_failures", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_login_failures_address"), ["address"], unique=False)
        batch_op.create_index(batch_op.f("ix_login_failures_at"), ["at"], unique=False)
        batch_op.create_index(batch_op.f("ix_login_failures_username"), ["username"], unique=False)

    op.create_table(
        "users",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("username", sa.String(length=64), nullable=False),
        sa.Column("display_name", sa.String(length=128), nullable=False),
        sa.Column("password_hash", sa.String(length=255), nullable=False),
        sa.Column("role", sa.String(length=16), nullable=False),
        sa.Column("active", sa.Boolean(), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("username"),
    )
    op.create_table(
        "documents",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=255), nullable=False),
        sa.Column("position", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("corpus_id", "name"),
    )
    with op.batch_alter_table("documents", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_documents_corpus_id"), ["corpus_id"], unique=False)

    op.create_table(
        "grammar_versions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("number", sa.Integer(), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("progress", sa.Float(), nullable=False),
        sa.Column("message", sa.Text(), nullable=False),
        sa.Column("options", sa.JSON(), nullable=False),
        sa.Column("training_size", sa.Integer(), nullable=False),
        sa.Column("heldout_size", sa.Integer(), nullable=False),
        sa.Column("heldout_f1", sa.Float(), nullable=True),
        sa.Column("gold_count_at_start", sa.Integer(), nullable=False),
        sa.Column("train_seconds", sa.Float(), nullable=True),
        sa.Column("data", sa.LargeBinary(), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.Column("finished_at", sa.DateTime(), nullable=True),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("corpus_id", "number"),
    )
    with op.batch_alter_table("grammar_versions", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_grammar_versions_corpus_id"), ["corpus_id"], unique=False
        )

    op.create_table(
        "user_sessions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("token_hash", sa.String(length=64), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("csrf_token", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.Column("expires_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["user_id"], ["users.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("token_hash"),
    )
    with op.batch_alter_table("user_sessions", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_user_sessions_user_id"), ["user_id"], unique=False)

    op.create_table(
        "sentences",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("document_id", sa.Integer(), nullable=False),
        sa.Column("position", sa.Integer(), nullable=False),
        sa.Column("tokens", sa.JSON(), nullable=False),
        sa.Column("text", sa.Text(), nullable=False),
        sa.Column("state", sa.String(length=16), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["document_id"], ["documents.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("document_id", "position"),
    )
    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.create_index("ix_sentences_corpus_state", ["corpus_id", "state"], unique=False)
        batch_op.create_index(batch_op.f("ix_sentences_document_id"), ["document_id"], unique=False)

    op.create_table(
        "annotations",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sentence_id", sa.Integer(), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=16), nullable=False),
        sa.Column("head", sa.Integer(), nullable=False),
        sa.Column("comment", sa.Text(), nullable=False),
        sa.Column("flag", sa.String(length=64), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.Column("updated_at", sa.DateTime(), nullable=False),
        sa.Column("submitted_at", sa.DateTime(), nullable=True),
        sa.ForeignKeyConstraint(["sentence_id"], ["sentences.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["user_id"], ["users.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("sentence_id", "user_id"),
    )
    with op.batch_alter_table("annotations", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_annotations_sentence_id"), ["sentence_id"], unique=False
        )
        batch_op.create_index(batch_op.f("ix_annotations_user_id"), ["user_id"], unique=False)

    op.create_table(
        "assignments",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sentence_id", sa.Integer(), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["sentence_id"], ["sentences.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["user_id"], ["users.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("sentence_id", "user_id"),
    )
    with op.batch_alter_table("assignments", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_assignments_sentence_id"), ["sentence_id"], unique=False
        )
        batch_op.create_index(batch_op.f("ix_assignments_user_id"), ["user_id"], unique=False)

    op.create_table(
        "events",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("at", sa.DateTime(), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=True),
        sa.Column("kind", sa.String(length=64), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=True),
        sa.Column("sentence_id", sa.Integer(), nullable=True),
        sa.Column("detail", sa.JSON(), nullable=False),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["sentence_id"], ["sentences.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["user_id"], ["users.id"], ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("events", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_events_at"), ["at"], unique=False)
        batch_op.create_index(batch_op.f("ix_events_corpus_id"), ["corpus_id"], unique=False)

    op.create_table(
        "suggestions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sentence_id", sa.Integer(), nullable=False),
        sa.Column("grammar_version_id", sa.Integer(), nullable=False),
        sa.Column("trees", sa.JSON(), nullable=False),
        sa.Column("logprobs", sa.JSON(), nullable=False),
        sa.Column("posteriors", sa.JSON(), nullable=False),
        sa.Column("fallback", sa.Boolean(), nullable=False),
        sa.Column("seconds", sa.Float(), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(
            ["grammar_version_id"], ["grammar_versions.id"], ondelete="CASCADE"
        ),
        sa.ForeignKeyConstraint(["sentence_id"], ["sentences.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("sentence_id", "grammar_version_id"),
    )
    with op.batch_alter_table("suggestions", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_suggestions_grammar_version_id"), ["grammar_version_id"], unique=False
        )
        batch_op.create_index(
            batch_op.f("ix_suggestions_sentence_id"), ["sentence_id"], unique=False
        )

    op.create_table(
        "agreement_records",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("corpus_id", sa.Integer(), nullable=False),
        sa.Column("sentence_id", sa.Integer(), nullable=False),
        sa.Column("annotation_a_id", sa.Integer(), nullable=False),
        sa.Column("annotation_b_id", sa.Integer(), nullable=False),
        sa.Column("user_a_id", sa.Integer(), nullable=False),
        sa.Column("user_b_id", sa.Integer(), nullable=False),
        sa.Column("matched", sa.Integer(), nullable=False),
        sa.Column("count_a", sa.Integer(), nullable=False),
        sa.Column("count_b", sa.Integer(), nullable=False),
        sa.Column("labelled_precision", sa.Float(), nullable=False),
        sa.Column("labelled_recall", sa.Float(), nullable=False),
        sa.Column("labelled_f1", sa.Float(), nullable=False),
        sa.Column("unlabelled_f1", sa.Float(), nullable=False),
        sa.Column("pos_agreement", sa.Float(), nullable=False),
        sa.Column("identical", sa.Boolean(), nullable=False),
        sa.Column("detail", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["annotation_a_id"], ["annotations.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["annotation_b_id"], ["annotations.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["corpus_id"], ["corpora.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["sentence_id"], ["sentences.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["user_a_id"], ["users.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["user_b_id"], ["users.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("agreement_records", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_agreement_records_corpus_id"), ["corpus_id"], unique=False
        )
        batch_op.create_index(
            batch_op.f("ix_agreement_records_created_at"), ["created_at"], unique=False
        )
        batch_op.create_index(
            batch_op.f("ix_agreement_records_sentence_id"), ["sentence_id"], unique=False
        )

    op.create_table(
        "gold",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sentence_id", sa.Integer(), nullable=False),
        sa.Column("tree", sa.Text(), nullable=False),
        sa.Column("provenance", sa.String(length=16), nullable=False),
        sa.Column("adjudicator_id", sa.Integer(), nullable=True),
        sa.Column("source_annotation_id", sa.Integer(), nullable=True),
        sa.Column("note", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.Column("retired_at", sa.DateTime(), nullable=True),
        sa.Column("retired_by_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["adjudicator_id"], ["users.id"], ondelete="SET NULL"),
        sa.ForeignKeyConstraint(["retired_by_id"], ["users.id"], ondelete="SET NULL"),
        sa.ForeignKeyConstraint(["sentence_id"], ["sentences.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["source_annotation_id"], ["annotations.id"], ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("gold", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_gold_sentence_id"), ["sentence_id"], unique=False)

    op.create_table(
        "revisions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("annotation_id", sa.Integer(), nullable=False),
        sa.Column("number", sa.Integer(), nullable=False),
        sa.Column("tree", sa.Text(), nullable=False),
        sa.Column("pins", sa.JSON(), nullable=False),
        sa.Column("source", sa.String(length=16), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["annotation_id"], ["annotations.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["user_id"], ["users.id"], ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("annotation_id", "number"),
    )
    with op.batch_alter_table("revisions", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_revisions_annotation_id"), ["annotation_id"], unique=False
        )
    # The corpus -> active grammar reference closes a cycle, so it is added last. SQLite cannot
    # add a constraint to an existing table; batch mode rebuilds the table to do it.
    with op.batch_alter_table("corpora") as batch:
        batch.create_foreign_key(
            "fk_corpora_active_grammar",
            "grammar_versions",
            ["active_grammar_id"],
            ["id"],
            ondelete="SET NULL",
        )


def downgrade() -> None:
    with op.batch_alter_table("corpora") as batch:
        batch.drop_constraint("fk_corpora_active_grammar", type_="foreignkey")
    with op.batch_alter_table("revisions", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_revisions_annotation_id"))

    op.drop_table("revisions")
    with op.batch_alter_table("gold", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_gold_sentence_id"))

    op.drop_table("gold")
    with op.batch_alter_table("agreement_records", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_agreement_records_sentence_id"))
        batch_op.drop_index(batch_op.f("ix_agreement_records_created_at"))
        batch_op.drop_index(batch_op.f("ix_agreement_records_corpus_id"))

    op.drop_table("agreement_records")
    with op.batch_alter_table("suggestions", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_suggestions_sentence_id"))
        batch_op.drop_index(batch_op.f("ix_suggestions_grammar_version_id"))

    op.drop_table("suggestions")
    with op.batch_alter_table("events", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_events_corpus_id"))
        batch_op.drop_index(batch_op.f("ix_events_at"))

    op.drop_table("events")
    with op.batch_alter_table("assignments", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_assignments_user_id"))
        batch_op.drop_index(batch_op.f("ix_assignments_sentence_id"))

    op.drop_table("assignments")
    with op.batch_alter_table("annotations", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_annotations_user_id"))
        batch_op.drop_index(batch_op.f("ix_annotations_sentence_id"))

    op.drop_table("annotations")
    with op.batch_alter_table("sentences", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_sentences_document_id"))
        batch_op.drop_index("ix_sentences_corpus_state")

    op.drop_table("sentences")
    with op.batch_alter_table("user_sessions", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_user_sessions_user_id"))

    op.drop_table("user_sessions")
    with op.batch_alter_table("grammar_versions", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_grammar_versions_corpus_id"))

    op.drop_table("grammar_versions")
    with op.batch_alter_table("documents", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_documents_corpus_id"))

    op.drop_table("documents")
    op.drop_table("users")
    with op.batch_alter_table("login_failures", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_login_failures_username"))
        batch_op.drop_index(batch_op.f("ix_login_failures_at"))
        batch_op.drop_index(batch_op.f("ix_login_failures_address"))

    op.drop_table("login_failures")
    op.drop_table("corpora")
