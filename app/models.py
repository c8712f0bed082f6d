"""The ORM: users, corpora, sentences, annotations with append-only revisions, gold, grammars.

Roles and states are ``StrEnum``s (below), stored as their plain string values so that
PostgreSQL and SQLite store them alike; the services check them. Trees are stored as one-line
bracketed text (parser.trees).
"""

from __future__ import annotations

from datetime import UTC, datetime
from enum import StrEnum
from typing import Any

from sqlalchemy import (
    JSON,
    BigInteger,
    Boolean,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
    select,
    text,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, deferred, mapped_column, relationship

from app.corpus_settings import CorpusSettings
from app.corpus_settings import read as read_settings


class Role(StrEnum):
    """Roles, from most to least powerful."""

    ADMIN = "admin"
    ADJUDICATOR = "adjudicator"
    ANNOTATOR = "annotator"


class SentenceState(StrEnum):
    QUEUED = "queued"  # waiting for its annotators
    IN_PROGRESS = "in_progress"  # someone has saved a tree
    #: An annotator held the sentence back (a reason such as "tokenization wrong"); it waits
    #: for an adjudicator or admin to release it, have its tokens fixed, or drop it.
    HELD_BACK = "held_back"
    IN_REVIEW = "in_review"  # every annotation handed in; waits for an adjudicator
    GOLD = "gold"
    #: Dropped from the corpus: kept with its history, but out of every queue, export,
    #: agreement figure and training set.
    DROPPED = "dropped"


class AnnotationState(StrEnum):
    DRAFT = "draft"
    SUBMITTED = "submitted"  # "hand in" on the pages
    FLAGGED = "flagged"  # "hold back" on the pages


class GrammarStatus(StrEnum):
    QUEUED = "queued"
    TRAINING = "training"
    READY = "ready"
    REJECTED = "rejected"
    FAILED = "failed"


# The short names the code uses; each is the enum member above.
ROLE_ADMIN = Role.ADMIN
ROLE_ADJUDICATOR = Role.ADJUDICATOR
ROLE_ANNOTATOR = Role.ANNOTATOR
ROLES = tuple(Role)

SENT_QUEUED = SentenceState.QUEUED
SENT_IN_PROGRESS = SentenceState.IN_PROGRESS
SENT_IN_REVIEW = SentenceState.IN_REVIEW
SENT_GOLD = SentenceState.GOLD
SENT_HELD_BACK = SentenceState.HELD_BACK
SENT_DROPPED = SentenceState.DROPPED
SENTENCE_STATES = tuple(SentenceState)

ANN_DRAFT = AnnotationState.DRAFT
ANN_SUBMITTED = AnnotationState.SUBMITTED
ANN_FLAGGED = AnnotationState.FLAGGED
ANNOTATION_STATES = tuple(AnnotationState)

# Start kinds: what the first tree of every annotation of a sentence is (the suggestion's
# consensus tree, its best reading, the parser's fallback tree, or a flat tree without grammar).
START_CONSENSUS = "consensus"
START_BEST = "best"
START_FALLBACK = "fallback"
START_FLAT = "flat"
START_KINDS = (START_CONSENSUS, START_BEST, START_FALLBACK, START_FLAT)

# Where a revision's tree came from.
REV_SOURCES = (
    "suggestion",
    "edit",
    "reparse",
    "alternative",
    "text",
    "import",
    "flat",
    "restore",
    "tokens",
)
# the edit actions the Bench counts with each revision (Revision.actions)
ACTION_KINDS = (
    "add",
    "remove",
    "relabel",
    "retag",
    "move",
    "edge",
    "pin",
    "reparse",
    "reading",
    "text",
    "undo",
    "redo",
    "restore",
    "tokens",
)

GV_QUEUED = GrammarStatus.QUEUED
GV_TRAINING = GrammarStatus.TRAINING
GV_READY = GrammarStatus.READY
GV_REJECTED = GrammarStatus.REJECTED
GV_FAILED = GrammarStatus.FAILED


def utcnow() -> datetime:
    return datetime.now(UTC).replace(tzinfo=None)


class Base(DeclarativeBase):
    type_annotation_map = {dict[str, Any]: JSON, list[Any]: JSON}


class User(Base):
    __tablename__ = "users"
    id: Mapped[int] = mapped_column(primary_key=True)
    username: Mapped[str] = mapped_column(String(64), unique=True)
    display_name: Mapped[str] = mapped_column(String(128), default="")
    password_hash: Mapped[str] = mapped_column(String(255))
    role: Mapped[str] = mapped_column(String(16), default=ROLE_ANNOTATOR)
    active: Mapped[bool] = mapped_column(Boolean, default=True)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)

    @property
    def is_admin(self) -> bool:
        return self.role == ROLE_ADMIN

    @property
    def can_adjudicate(self) -> bool:
        return self.role in (ROLE_ADMIN, ROLE_ADJUDICATOR)


class UserSession(Base):
    """A server-side login session; the cookie holds only ``token``'s value."""

    __tablename__ = "user_sessions"
    id: Mapped[int] = mapped_column(primary_key=True)
    token_hash: Mapped[str] = mapped_column(String(64), unique=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("users.id", ondelete="CASCADE"), index=True)
    csrf_token: Mapped[str] = mapped_column(String(64))
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    expires_at: Mapped[datetime] = mapped_column(DateTime)
    user: Mapped[User] = relationship()


class LoginFailure(Base):
    """One failed login, for the per-account and per-address delay."""

    __tablename__ = "login_failures"
    id: Mapped[int] = mapped_column(primary_key=True)
    username: Mapped[str] = mapped_column(String(64), index=True)
    address: Mapped[str] = mapped_column(String(64), index=True)
    at: Mapped[datetime] = mapped_column(DateTime, default=utcnow, index=True)


class Corpus(Base):
    __tablename__ = "corpora"
    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(128), unique=True)
    description: Mapped[str] = mapped_column(Text, default="")
    label_set: Mapped[list[Any]] = mapped_column(JSON, default=list)
    tag_set: Mapped[list[Any]] = mapped_column(JSON, default=list)
    settings: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    active_grammar_id: Mapped[int | None] = mapped_column(
        ForeignKey(
            "grammar_versions.id",
            use_alter=True,
            name="fk_corpora_active_grammar",
            ondelete="SET NULL",
        ),
        nullable=True,
    )
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)

    documents: Mapped[list[Document]] = relationship(
        back_populates="corpus",
        order_by="Document.position",
        cascade="all, delete-orphan",
        passive_deletes=True,
    )

    @property
    def options(self) -> CorpusSettings:
        """The corpus's settings, typed and with defaults (app.corpus_settings)."""
        return read_settings(self.settings)


class Document(Base):
    __tablename__ = "documents"
    __table_args__ = (UniqueConstraint("corpus_id", "name"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    corpus_id: Mapped[int] = mapped_column(ForeignKey("corpora.id", ondelete="CASCADE"), index=True)
    name: Mapped[str] = mapped_column(String(255))
    position: Mapped[int] = mapped_column(Integer, default=0)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)

    corpus: Mapped[Corpus] = relationship(back_populates="documents")
    sentences: Mapped[list[Sentence]] = relationship(
        back_populates="document",
        order_by="Sentence.position",
        cascade="all, delete-orphan",
        passive_deletes=True,
    )


class Sentence(Base):
    __tablename__ = "sentences"
    # Reading order is (document_id, position): a document's id grows with its position (both
    # are given at creation, never changed). The two indexes serve the corpus page's keyset
    # pages, with and without a state filter.
    __table_args__ = (
        UniqueConstraint("document_id", "position"),
        Index("ix_sentences_corpus_order", "corpus_id", "document_id", "position"),
        Index("ix_sentences_corpus_state_order", "corpus_id", "state", "document_id", "position"),
    )
    id: Mapped[int] = mapped_column(primary_key=True)
    corpus_id: Mapped[int] = mapped_column(ForeignKey("corpora.id", ondelete="CASCADE"))
    document_id: Mapped[int] = mapped_column(
        ForeignKey("documents.id", ondelete="CASCADE"), index=True
    )
    position: Mapped[int] = mapped_column(Integer)
    tokens: Mapped[list[Any]] = mapped_column(JSON)
    text: Mapped[str] = mapped_column(Text)
    state: Mapped[str] = mapped_column(String(16), default=SENT_QUEUED)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    # which version of the tokens is current (1 as imported; a token fix adds one)
    token_version: Mapped[int] = mapped_column(Integer, default=1, server_default="1")
    #: How unsure the grammar ``entropy_grammar_id`` is about the sentence: its tree entropy
    #: per word in nats (parser.chart.tree_entropy); orders the queue "most informative
    #: first". None until computed.
    entropy_per_word: Mapped[float | None] = mapped_column(Float, nullable=True)
    entropy_grammar_id: Mapped[int | None] = mapped_column(Integer, nullable=True)
    #: The start every annotator of this sentence gets (one of START_KINDS), fixed by the first
    #: opening on the Bench; with the grammar version whose suggestion it came from (None for
    #: ``flat``). None while nobody has opened the sentence.
    start_kind: Mapped[str | None] = mapped_column(String(16), nullable=True, default=None)
    start_grammar_version_id: Mapped[int | None] = mapped_column(
        ForeignKey("grammar_versions.id", ondelete="SET NULL"), nullable=True, default=None
    )

    document: Mapped[Document] = relationship(back_populates="sentences")


class TokenVersion(Base):
    """An earlier version of a sentence's tokens, kept when a token fix replaced it, with the
    change that led from it to the next version: ``{"position": p, "count": c, "tokens":
    [...]}`` (the c tokens from p were replaced by these). Append-only."""

    __tablename__ = "token_versions"
    __table_args__ = (UniqueConstraint("sentence_id", "number"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    sentence_id: Mapped[int] = mapped_column(
        ForeignKey("sentences.id", ondelete="CASCADE"), index=True
    )
    number: Mapped[int] = mapped_column(Integer)
    tokens: Mapped[list[Any]] = mapped_column(JSON)
    text: Mapped[str] = mapped_column(Text)
    change: Mapped[dict[str, Any]] = mapped_column(JSON)
    user_id: Mapped[int | None] = mapped_column(
        ForeignKey("users.id", ondelete="SET NULL"), nullable=True
    )
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)


def reading_rank(document_id: int, position: int) -> int:
    """A sentence's place in reading order as one sortable integer."""
    return (int(document_id) << 32) + int(position)


def _sentence_place(context: Any) -> tuple[int, int]:
    """(corpus_id, reading rank) of the sentence an Assignment being inserted names."""
    sentence_id = context.get_current_parameters()["sentence_id"]
    row = context.connection.execute(
        select(Sentence.corpus_id, Sentence.document_id, Sentence.position).where(
            Sentence.id == sentence_id
        )
    ).first()
    if row is None:  # the foreign key refuses the row anyway
        return 0, 0
    return int(row[0]), reading_rank(row[1], row[2])


class Assignment(Base):
    """A sentence in a user's queue. ``corpus_id`` and ``rank`` copy what the queue is ordered
    by (corpus, then ``rank``, then sentence id), so that a page of a queue, a sentence's
    neighbours and its place are index walks over this table alone. ``rank`` defaults to the
    sentence's reading order (:func:`reading_rank`); a service may store another order (most
    useful first, say) as long as it keeps it an integer. Both are filled from the sentence
    when an insert does not give them."""

    __tablename__ = "assignments"
    __table_args__ = (
        UniqueConstraint("sentence_id", "user_id"),
        Index("ix_assignments_queue", "user_id", "corpus_id", "rank", "sentence_id"),
    )
    id: Mapped[int] = mapped_column(primary_key=True)
    sentence_id: Mapped[int] = mapped_column(
        ForeignKey("sentences.id", ondelete="CASCADE"), index=True
    )
    user_id: Mapped[int] = mapped_column(ForeignKey("users.id", ondelete="CASCADE"), index=True)
    corpus_id: Mapped[int] = mapped_column(
        ForeignKey("corpora.id", ondelete="CASCADE"), default=lambda ctx: _sentence_place(ctx)[0]
    )
    rank: Mapped[int] = mapped_column(BigInteger, default=lambda ctx: _sentence_place(ctx)[1])
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)


class CorpusMember(Base):
    """A user named a member of a corpus by an admin (annotators and adjudicators alike).
    An annotator reads a corpus they are a member of, or one with work assigned to them
    (:mod:`app.services.visibility`)."""

    __tablename__ = "corpus_members"
    corpus_id: Mapped[int] = mapped_column(
        ForeignKey("corpora.id", ondelete="CASCADE"), primary_key=True
    )
    user_id: Mapped[int] = mapped_column(
        ForeignKey("users.id", ondelete="CASCADE"), primary_key=True, index=True
    )
    added_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    added_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("users.id", ondelete="SET NULL"), nullable=True, default=None
    )


class QueueCount(Base):
    """How many sentences of a corpus are assigned to a user, how many of those the user has
    submitted, and how many of them are dropped: kept by database triggers on assignments,
    annotations and sentences (:mod:`app.counts`), so that the Queue's totals read a row per
    corpus instead of counting the user's queue."""

    __tablename__ = "queue_counts"
    user_id: Mapped[int] = mapped_column(
        ForeignKey("users.id", ondelete="CASCADE"), primary_key=True
    )
    corpus_id: Mapped[int] = mapped_column(
        ForeignKey("corpora.id", ondelete="CASCADE"), primary_key=True, index=True
    )
    assigned: Mapped[int] = mapped_column(Integer, default=0)
    submitted: Mapped[int] = mapped_column(Integer, default=0)
    dropped: Mapped[int] = mapped_column(Integer, default=0)


#: Queue ranks per block of :class:`QueueBlock`: a rank's block is ``rank >> QUEUE_BLOCK_BITS``.
QUEUE_BLOCK_BITS = 10


class QueueBlock(Base):
    """How many of a user's assignments in a corpus have a rank in one block of ranks
    (``rank >> QUEUE_BLOCK_BITS``: 1,024 ranks, so at most one document in reading order), kept
    by database triggers on ``assignments`` (:mod:`app.counts`). A sentence's place in its
    queue is the sum of the blocks before its own plus a count inside its block, instead of
    a count of every assignment before it."""

    __tablename__ = "queue_blocks"
    user_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    corpus_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    block: Mapped[int] = mapped_column(BigInteger, primary_key=True)
    n: Mapped[int] = mapped_column(Integer, default=0)


class FigureMark(Base):
    """Change marks of a corpus's figures, kept by database triggers (:mod:`app.counts`) in
    rows whose sums are the marks (one row per writing server process's shard, so concurrent
    hand-ins of one corpus do not queue at one row): how many agreement records the corpus
    has, how many times a record was removed or a sentence moved to or from ``dropped``, and
    how many times a handed-in annotation changed (handed in, saved, sent back, removed, or
    its sentence dropped, brought back or removed). The Agreement page keeps its sums and
    reads these rows to know whether they are still current (:mod:`app.services.agreement`,
    :mod:`app.services.effort`). No foreign key: a removed corpus's records take its counts
    back to zero, and kept sums go with the corpus."""

    __tablename__ = "figure_mark_shards"
    corpus_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    shard: Mapped[int] = mapped_column(Integer, primary_key=True)
    agreement_records: Mapped[int] = mapped_column(Integer, default=0)
    agreement_changes: Mapped[int] = mapped_column(Integer, default=0)
    handed_in_changes: Mapped[int] = mapped_column(Integer, default=0)


class HiddenSentence(Base):
    """A sentence with agreement records that a user still annotates (assigned to it or
    started an annotation of it, not handed in: the blind rule of
    :mod:`app.services.blind`), kept by database triggers (:mod:`app.counts`), so that what is
    hidden from a reader of the Agreement page is one index range of their own rows."""

    __tablename__ = "hidden_sentences"
    __table_args__ = (Index("ix_hidden_sentences_sentence", "sentence_id"),)
    user_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    corpus_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    sentence_id: Mapped[int] = mapped_column(Integer, primary_key=True)


class EffortShare(Base):
    """One handed-in annotation's share of the effort table (its revisions' seconds and
    actions, its words, its distance from the start), stored under the fingerprint it was
    computed for (``head|updated_at|user_id``), so that a new process computes only the
    shares of annotations changed since (:mod:`app.services.effort`). A cache."""

    __tablename__ = "effort_shares"
    annotation_id: Mapped[int] = mapped_column(
        ForeignKey("annotations.id", ondelete="CASCADE"), primary_key=True
    )
    fingerprint: Mapped[str] = mapped_column(String(80))
    share: Mapped[Any] = mapped_column(JSON, nullable=True)


class KeptSums(Base):
    """A corpus's figures summed so far, kept in the database so that a new process (or
    another server) starts from them instead of summing every record again
    (:mod:`app.services.agreement`, :mod:`app.services.effort`). ``kind`` says which sums
    (``agreement``, ``effort``); ``changes`` is the corpus's figure mark they were made at
    (``agreement_changes`` or ``handed_in_changes`` of ``figure_mark_shards``, summed); for
    the agreement sums,
    ``last_id`` is the highest record id summed and ``seen`` the records read up to it.
    A cache: removing a row costs one full sum at the next view."""

    __tablename__ = "kept_sums"
    corpus_id: Mapped[int] = mapped_column(
        ForeignKey("corpora.id", ondelete="CASCADE"), primary_key=True
    )
    kind: Mapped[str] = mapped_column(String(16), primary_key=True)
    changes: Mapped[int] = mapped_column(Integer, default=0)
    seen: Mapped[int] = mapped_column(Integer, default=0)
    last_id: Mapped[int] = mapped_column(Integer, default=0)
    sums: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)


class SentenceCount(Base):
    """How many sentences of a document are in each state, kept by database triggers on
    ``sentences`` (:mod:`app.counts`), so that the corpus pages read a few rows instead of
    counting every sentence."""

    __tablename__ = "sentence_counts"
    document_id: Mapped[int] = mapped_column(
        ForeignKey("documents.id", ondelete="CASCADE"), primary_key=True
    )
    state: Mapped[str] = mapped_column(String(16), primary_key=True)
    corpus_id: Mapped[int] = mapped_column(ForeignKey("corpora.id", ondelete="CASCADE"), index=True)
    n: Mapped[int] = mapped_column(Integer, default=0)


class Annotation(Base):
    """One annotator's tree for one sentence; its history is the list of revisions.

    ``head`` is the number of the newest revision (0 before the first save). A save carries the
    head it was based on; the unique (annotation_id, number) pair of revisions makes a stale or
    racing save fail instead of overwriting (the service answers 409).
    """

    __tablename__ = "annotations"
    # (user_id, state): a queue's submitted count reads the user's submitted annotations only
    __table_args__ = (
        UniqueConstraint("sentence_id", "user_id"),
        Index("ix_annotations_user_state", "user_id", "state"),
    )
    id: Mapped[int] = mapped_column(primary_key=True)
    sentence_id: Mapped[int] = mapped_column(
        ForeignKey("sentences.id", ondelete="CASCADE"), index=True
    )
    user_id: Mapped[int] = mapped_column(ForeignKey("users.id", ondelete="CASCADE"), index=True)
    state: Mapped[str] = mapped_column(String(16), default=ANN_DRAFT)
    head: Mapped[int] = mapped_column(Integer, default=0)
    comment: Mapped[str] = mapped_column(Text, default="")
    flag: Mapped[str | None] = mapped_column(String(64), nullable=True)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    updated_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    submitted_at: Mapped[datetime | None] = mapped_column(DateTime, nullable=True)
    # the tree the annotator's work started from (the suggestion shown before the first save)
    start_tree: Mapped[str | None] = mapped_column(Text, nullable=True)
    #: What this annotation started from (copied from its sentence's fixed start when the
    #: annotation is created): one of START_KINDS, the grammar version and its suggestion row.
    start_kind: Mapped[str | None] = mapped_column(String(16), nullable=True, default=None)
    start_grammar_version_id: Mapped[int | None] = mapped_column(
        ForeignKey("grammar_versions.id", ondelete="SET NULL"), nullable=True, default=None
    )
    start_suggestion_id: Mapped[int | None] = mapped_column(
        ForeignKey("suggestions.id", ondelete="SET NULL"), nullable=True, default=None
    )


class Revision(Base):
    """An append-only saved tree. Never updated or deleted by the service."""

    __tablename__ = "revisions"
    __table_args__ = (UniqueConstraint("annotation_id", "number"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    annotation_id: Mapped[int] = mapped_column(
        ForeignKey("annotations.id", ondelete="CASCADE"), index=True
    )
    number: Mapped[int] = mapped_column(Integer)
    tree: Mapped[str] = mapped_column(Text)
    pins: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    source: Mapped[str] = mapped_column(String(16), default="edit")
    user_id: Mapped[int | None] = mapped_column(
        ForeignKey("users.id", ondelete="SET NULL"), nullable=True
    )
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    # the version of the sentence's tokens this tree was made on
    token_version: Mapped[int] = mapped_column(Integer, default=1, server_default="1")
    # measured by the page since the previous save: active editing seconds (idle gaps over a
    # minute left out) and the edit actions by kind
    active_seconds: Mapped[float] = mapped_column(Float, default=0.0, server_default="0")
    actions: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict, server_default=text("'{}'"))


class Gold(Base):
    """A gold tree with provenance. Reopening retires it (``retired_at``) but keeps it."""

    __tablename__ = "gold"
    id: Mapped[int] = mapped_column(primary_key=True)
    sentence_id: Mapped[int] = mapped_column(
        ForeignKey("sentences.id", ondelete="CASCADE"), index=True
    )
    tree: Mapped[str] = mapped_column(Text)
    provenance: Mapped[str] = mapped_column(String(16))  # import | agreement | adjudication
    adjudicator_id: Mapped[int | None] = mapped_column(
        ForeignKey("users.id", ondelete="SET NULL"), nullable=True
    )
    source_annotation_id: Mapped[int | None] = mapped_column(
        ForeignKey("annotations.id", ondelete="SET NULL"), nullable=True
    )
    note: Mapped[str] = mapped_column(Text, default="")
    #: The annotators' notes for the adjudicator when the gold was made, as
    #: ``[{"annotation_id", "annotator", "note", "flag"}]`` (kept with the gold: notes can
    #: change later, the history shows what the decision was made with).
    annotator_notes: Mapped[list[Any]] = mapped_column(JSON, default=list)
    #: The adjudicator had submitted an annotation of this sentence themselves.
    own_annotation: Mapped[bool] = mapped_column(Boolean, default=False)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    retired_at: Mapped[datetime | None] = mapped_column(DateTime, nullable=True)
    retired_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("users.id", ondelete="SET NULL"), nullable=True
    )


class GrammarVersion(Base):
    """A trained grammar (or a training job in progress) of one corpus."""

    __tablename__ = "grammar_versions"
    __table_args__ = (UniqueConstraint("corpus_id", "number"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    corpus_id: Mapped[int] = mapped_column(ForeignKey("corpora.id", ondelete="CASCADE"), index=True)
    number: Mapped[int] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String(16), default=GV_QUEUED)
    progress: Mapped[float] = mapped_column(Float, default=0.0)
    message: Mapped[str] = mapped_column(Text, default="")
    options: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    training_size: Mapped[int] = mapped_column(Integer, default=0)
    heldout_size: Mapped[int] = mapped_column(Integer, default=0)
    heldout_f1: Mapped[float | None] = mapped_column(Float, nullable=True)
    gold_count_at_start: Mapped[int] = mapped_column(Integer, default=0)
    train_seconds: Mapped[float | None] = mapped_column(Float, nullable=True)
    data: Mapped[bytes | None] = deferred(mapped_column(LargeBinary, nullable=True))
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    finished_at: Mapped[datetime | None] = mapped_column(DateTime, nullable=True)
    # who runs the job while it trains: host name, process id, and when it last said so
    owner_host: Mapped[str | None] = mapped_column(String(255), nullable=True)
    owner_pid: Mapped[int | None] = mapped_column(Integer, nullable=True)
    heartbeat_at: Mapped[datetime | None] = mapped_column(DateTime, nullable=True)


class ReferenceSet(Base):
    """Trees from outside the corpus (an open treebank under its licence, a team's older
    trees) that the corpus's grammars train on beside its gold. They are never sentences of
    the corpus: not in its queue, its agreement figures or its exports."""

    __tablename__ = "reference_sets"
    __table_args__ = (UniqueConstraint("corpus_id", "name"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    corpus_id: Mapped[int] = mapped_column(ForeignKey("corpora.id", ondelete="CASCADE"), index=True)
    name: Mapped[str] = mapped_column(String(128))
    source: Mapped[str] = mapped_column(Text, default="")
    licence: Mapped[str] = mapped_column(Text, default="")
    #: One bracketed tree per line (parser.trees.write_tree), empty elements removed.
    trees: Mapped[str] = mapped_column(Text, deferred=True)
    tree_count: Mapped[int] = mapped_column(Integer, default=0)
    word_count: Mapped[int] = mapped_column(Integer, default=0)
    #: Whether training uses the set (a set is switched off, never silently dropped).
    in_use: Mapped[bool] = mapped_column(Boolean, default=True)
    created_by: Mapped[int | None] = mapped_column(
        ForeignKey("users.id", ondelete="SET NULL"), nullable=True
    )
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)


class Suggestion(Base):
    """The parser's output for one sentence under one grammar version (k trees, posteriors,
    the consensus tree)."""

    __tablename__ = "suggestions"
    __table_args__ = (UniqueConstraint("sentence_id", "grammar_version_id"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    sentence_id: Mapped[int] = mapped_column(
        ForeignKey("sentences.id", ondelete="CASCADE"), index=True
    )
    grammar_version_id: Mapped[int] = mapped_column(
        ForeignKey("grammar_versions.id", ondelete="CASCADE"), index=True
    )
    trees: Mapped[list[Any]] = mapped_column(JSON)
    logprobs: Mapped[list[Any]] = mapped_column(JSON)
    posteriors: Mapped[list[Any]] = mapped_column(JSON, default=list)
    #: The consensus tree (parser.consensus), once the posteriors are in; None before that
    #: and for a fallback.
    consensus: Mapped[str | None] = mapped_column(Text, nullable=True, default=None)
    fallback: Mapped[bool] = mapped_column(Boolean, default=False)
    seconds: Mapped[float] = mapped_column(Float, default=0.0)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)


class AgreementRecord(Base):
    """Agreement of one pair of submitted annotations of one sentence."""

    __tablename__ = "agreement_records"
    id: Mapped[int] = mapped_column(primary_key=True)
    corpus_id: Mapped[int] = mapped_column(ForeignKey("corpora.id", ondelete="CASCADE"), index=True)
    sentence_id: Mapped[int] = mapped_column(
        ForeignKey("sentences.id", ondelete="CASCADE"), index=True
    )
    annotation_a_id: Mapped[int] = mapped_column(ForeignKey("annotations.id", ondelete="CASCADE"))
    annotation_b_id: Mapped[int] = mapped_column(ForeignKey("annotations.id", ondelete="CASCADE"))
    user_a_id: Mapped[int] = mapped_column(ForeignKey("users.id", ondelete="CASCADE"))
    user_b_id: Mapped[int] = mapped_column(ForeignKey("users.id", ondelete="CASCADE"))
    matched: Mapped[int] = mapped_column(Integer, default=0)
    count_a: Mapped[int] = mapped_column(Integer, default=0)
    count_b: Mapped[int] = mapped_column(Integer, default=0)
    labelled_precision: Mapped[float] = mapped_column(Float)
    labelled_recall: Mapped[float] = mapped_column(Float)
    labelled_f1: Mapped[float] = mapped_column(Float)
    unlabelled_f1: Mapped[float] = mapped_column(Float)
    pos_agreement: Mapped[float] = mapped_column(Float)
    identical: Mapped[bool] = mapped_column(Boolean, default=False)
    detail: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow, index=True)


class Event(Base):
    """The audit log: who did what, when."""

    __tablename__ = "events"
    id: Mapped[int] = mapped_column(primary_key=True)
    at: Mapped[datetime] = mapped_column(DateTime, default=utcnow, index=True)
    user_id: Mapped[int | None] = mapped_column(
        ForeignKey("users.id", ondelete="SET NULL"), nullable=True
    )
    kind: Mapped[str] = mapped_column(String(64))
    corpus_id: Mapped[int | None] = mapped_column(
        ForeignKey("corpora.id", ondelete="CASCADE"), nullable=True, index=True
    )
    sentence_id: Mapped[int | None] = mapped_column(
        ForeignKey("sentences.id", ondelete="CASCADE"), nullable=True
    )
    detail: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)


class FindingRunStatus(StrEnum):
    """A run of the inconsistency finder (app.services.findings)."""

    QUEUED = "queued"
    RUNNING = "running"
    DONE = "done"
    FAILED = "failed"


class Verdict(StrEnum):
    """What an adjudicator decided about a finding."""

    FINE = "fine_as_is"  # kept as it is; not listed as open again
    REOPENED = "reopened"  # its gold sentences were sent back to review


RUN_QUEUED = FindingRunStatus.QUEUED
RUN_RUNNING = FindingRunStatus.RUNNING
RUN_DONE = FindingRunStatus.DONE
RUN_FAILED = FindingRunStatus.FAILED
VERDICT_FINE = Verdict.FINE
VERDICT_REOPENED = Verdict.REOPENED
VERDICTS = tuple(Verdict)


class FindingRun(Base):
    """One run of the inconsistency finder over a corpus (queued, then run in the background).
    Its findings replace the previous run's on the findings page."""

    __tablename__ = "finding_runs"
    id: Mapped[int] = mapped_column(primary_key=True)
    corpus_id: Mapped[int] = mapped_column(ForeignKey("corpora.id", ondelete="CASCADE"), index=True)
    status: Mapped[str] = mapped_column(String(16), default=RUN_QUEUED)
    reason: Mapped[str] = mapped_column(Text, default="")
    requested_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("users.id", ondelete="SET NULL"), nullable=True
    )
    with_annotations: Mapped[bool] = mapped_column(Boolean, default=False)
    trees: Mapped[int] = mapped_column(Integer, default=0)
    seconds: Mapped[float | None] = mapped_column(Float, nullable=True)
    message: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
    finished_at: Mapped[datetime | None] = mapped_column(DateTime, nullable=True)
    # the process running it (app.services.owners): a retry takes it over only when it is gone
    owner_host: Mapped[str | None] = mapped_column(String(255), nullable=True)
    owner_pid: Mapped[int | None] = mapped_column(Integer, nullable=True)
    heartbeat_at: Mapped[datetime | None] = mapped_column(DateTime, nullable=True)


class FindingRow(Base):
    """One finding of a run: its kind, stable key (and that key's hash for verdicts), rank,
    score and occurrences (sentence, span, analysis, who settled it)."""

    __tablename__ = "findings"
    __table_args__ = (Index("ix_findings_run_rank", "run_id", "rank"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("finding_runs.id", ondelete="CASCADE"))
    corpus_id: Mapped[int] = mapped_column(ForeignKey("corpora.id", ondelete="CASCADE"), index=True)
    kind: Mapped[str] = mapped_column(String(16))
    key: Mapped[str] = mapped_column(Text)
    key_hash: Mapped[str] = mapped_column(String(64), index=True)
    rank: Mapped[int] = mapped_column(Integer)
    score: Mapped[float] = mapped_column(Float)
    summary: Mapped[str] = mapped_column(Text)
    occurrences: Mapped[list[Any]] = mapped_column(JSON, default=list)
    detail: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)


class FindingVerdict(Base):
    """An adjudicator's decision on a finding, remembered by the finding's key across runs
    (the newest verdict of a key counts; older ones stay as history)."""

    __tablename__ = "finding_verdicts"
    __table_args__ = (Index("ix_finding_verdicts_corpus_key", "corpus_id", "key_hash"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    corpus_id: Mapped[int] = mapped_column(ForeignKey("corpora.id", ondelete="CASCADE"))
    kind: Mapped[str] = mapped_column(String(16))
    key: Mapped[str] = mapped_column(Text)
    key_hash: Mapped[str] = mapped_column(String(64))
    verdict: Mapped[str] = mapped_column(String(16))
    user_id: Mapped[int | None] = mapped_column(
        ForeignKey("users.id", ondelete="SET NULL"), nullable=True
    )
    note: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(DateTime, default=utcnow)
