"""Sentence counts per document and state, kept up to date by the database itself.

The ``sentence_counts`` table (:class:`app.models.SentenceCount`) holds one row per (document,
state) with the number of that document's sentences in that state. Triggers on ``sentences``
move the counts on every insert, delete and change of state or document, whatever code path
writes (services, imports, bulk inserts, a cascade from a removed corpus), so the corpus pages
read a few rows instead of grouping every sentence: O(documents) instead of O(sentences).

:func:`ensure_triggers` runs at every start (from :func:`app.db.upgrade_to_head`): it creates
the triggers when they are missing (a fresh database, or a migration that rebuilt the
``sentences`` table, which drops a table's triggers on SQLite) and then recounts every row in
the same transaction, so the counts are right whichever way the database got here.

Cost: one extra row update per sentence write, in the writing transaction. On PostgreSQL two
transactions that change sentences of the same document and state wait for each other at the
count row until the first commits (both short); no other cross-transaction effect.
"""

from __future__ import annotations

from sqlalchemy import Connection, Engine, text

TRIGGER_NAMES = (
    "tw_sentence_counts_insert",
    "tw_sentence_counts_delete",
    "tw_sentence_counts_update",
)

_ADD = (
    "INSERT INTO sentence_counts (corpus_id, document_id, state, n) "
    "VALUES ({r}.corpus_id, {r}.document_id, {r}.state, 1) "
    "ON CONFLICT (document_id, state) DO UPDATE SET n = sentence_counts.n + 1"
)
_REMOVE = (
    "UPDATE sentence_counts SET n = n - 1 WHERE document_id = {r}.document_id AND state = {r}.state"
)

_SQLITE = [
    f"CREATE TRIGGER IF NOT EXISTS tw_sentence_counts_insert AFTER INSERT ON sentences "
    f"BEGIN {_ADD.format(r='NEW')}; END",
    f"CREATE TRIGGER IF NOT EXISTS tw_sentence_counts_delete AFTER DELETE ON sentences "
    f"BEGIN {_REMOVE.format(r='OLD')}; END",
    f"CREATE TRIGGER IF NOT EXISTS tw_sentence_counts_update "
    f"AFTER UPDATE OF state, document_id, corpus_id ON sentences "
    f"WHEN OLD.state IS NOT NEW.state OR OLD.document_id IS NOT NEW.document_id "
    f"OR OLD.corpus_id IS NOT NEW.corpus_id "
    f"BEGIN {_REMOVE.format(r='OLD')}; {_ADD.format(r='NEW')}; END",
]

_POSTGRES = [
    f"""CREATE OR REPLACE FUNCTION tw_sentence_counts() RETURNS trigger AS $$
BEGIN
  IF TG_OP = 'DELETE' OR TG_OP = 'UPDATE' THEN
    {_REMOVE.format(r="OLD")};
  END IF;
  IF TG_OP = 'INSERT' OR TG_OP = 'UPDATE' THEN
    {_ADD.format(r="NEW")};
  END IF;
  RETURN NULL;
END $$ LANGUAGE plpgsql""",
    "DROP TRIGGER IF EXISTS tw_sentence_counts_insert ON sentences",
    "CREATE TRIGGER tw_sentence_counts_insert AFTER INSERT OR DELETE ON sentences "
    "FOR EACH ROW EXECUTE FUNCTION tw_sentence_counts()",
    "DROP TRIGGER IF EXISTS tw_sentence_counts_update ON sentences",
    "CREATE TRIGGER tw_sentence_counts_update AFTER UPDATE OF state, document_id, corpus_id "
    "ON sentences FOR EACH ROW WHEN (OLD.state IS DISTINCT FROM NEW.state "
    "OR OLD.document_id IS DISTINCT FROM NEW.document_id "
    "OR OLD.corpus_id IS DISTINCT FROM NEW.corpus_id) EXECUTE FUNCTION tw_sentence_counts()",
]
# PostgreSQL folds insert and delete into one trigger; these are the names it uses.
_POSTGRES_NAMES = ("tw_sentence_counts_insert", "tw_sentence_counts_update")


def recount(conn: Connection) -> None:
    """Rebuild every count from the sentences (used after installing the triggers)."""
    conn.execute(text("DELETE FROM sentence_counts"))
    conn.execute(
        text(
            "INSERT INTO sentence_counts (corpus_id, document_id, state, n) "
            "SELECT corpus_id, document_id, state, COUNT(*) FROM sentences "
            "GROUP BY corpus_id, document_id, state"
        )
    )


def installed(conn: Connection) -> bool:
    """Whether every count trigger exists."""
    if conn.dialect.name == "sqlite":
        names = set(
            conn.execute(text("SELECT name FROM sqlite_master WHERE type = 'trigger'")).scalars()
        )
        return set(TRIGGER_NAMES) <= names
    names = set(
        conn.execute(
            text("SELECT tgname FROM pg_trigger WHERE tgrelid = 'sentences'::regclass")
        ).scalars()
    )
    return set(_POSTGRES_NAMES) <= names


def ensure_triggers(engine: Engine) -> bool:
    """Create the triggers and recount if any is missing; True when it did."""
    with engine.begin() as conn:
        if installed(conn):
            return False
        if conn.dialect.name == "postgresql":
            # one installer at a time (several workers may start together)
            conn.execute(text("SELECT pg_advisory_xact_lock(1729017)"))
            if installed(conn):
                return False
        for statement in _SQLITE if conn.dialect.name == "sqlite" else _POSTGRES:
            conn.execute(text(statement))
        recount(conn)
    return True


def drop_triggers(conn: Connection) -> None:
    """Remove the triggers (the migration's downgrade)."""
    if conn.dialect.name == "sqlite":
        for name in TRIGGER_NAMES:
            conn.execute(text(f"DROP TRIGGER IF EXISTS {name}"))
        return
    for name in _POSTGRES_NAMES:
        conn.execute(text(f"DROP TRIGGER IF EXISTS {name} ON sentences"))
    conn.execute(text("DROP FUNCTION IF EXISTS tw_sentence_counts()"))
