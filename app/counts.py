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

The ``queue_counts`` table (:class:`app.models.QueueCount`) is kept the same way: one row per
(user, corpus) with the sentences of the corpus assigned to the user, how many of those the
user's annotation is submitted of, and how many of them are dropped. Triggers on
``assignments`` (insert, delete, change), ``annotations`` (a state moving to or from
submitted, insert, delete, a move to another sentence) and ``sentences`` (a state moving to
or from dropped; a dropped sentence deleted) keep it, so the Queue's and the Bench's totals
read one row per corpus of the user instead of counting the queue. Cost: one or two indexed
row updates per such write (a change of a sentence's dropped state updates the rows of the
users it is assigned to).

The ``figure_mark_shards`` table (:class:`app.models.FigureMark`) holds change marks for the
Agreement page's kept sums, per corpus in rows the marks are the sums of (a row made by a
trigger on ``corpora``; on PostgreSQL each writing server process adds to one of 64 rows by
its process id, so hand-ins of one corpus in different connections do not wait for each
other at one row; on SQLite, which serializes writes, one row): the number of agreement
records (insert +1, delete -1), a count of every other change to what they sum (a record
removed, a sentence moved to or from dropped, a sentence removed), and a count of changes to
handed-in annotations (an annotation inserted, changed or removed while handed in before or
after, and the same sentence changes). A view compares the sums of a corpus's rows with the
marks its sums were made at. Cost: one indexed upsert per such write; a view reads at most
64 rows.

The ``queue_blocks`` table (:class:`app.models.QueueBlock`) counts each user's assignments per
corpus and block of ranks (``rank >> QUEUE_BLOCK_BITS``), kept by triggers on ``assignments``
(insert, delete, a change of user, corpus or rank), so a sentence's place in its queue sums
the blocks before it and counts inside its own block: O(blocks + block size) instead of
O(place). Cost: one indexed row update per assignment write.

The ``hidden_sentences`` table (:class:`app.models.HiddenSentence`) lists, per user and
corpus, the sentences with agreement records that the user still annotates (the blind rule
of :mod:`app.services.blind`: assigned to it or started an annotation of it, and not handed
in), so the Agreement page finds what is hidden from a reader with one index range of their
own rows: O(hidden) instead of a walk of their queue or of the corpus's records. Triggers on
``agreement_records`` (insert: a row per unfinished annotator of the sentence; delete: the
sentence's rows once it has no record left), ``assignments`` and ``annotations`` (insert,
delete, a change of user, sentence or state: the row of that user and sentence worked out
again) keep it. Cost: two or three index probes per such write.
"""

from __future__ import annotations

from sqlalchemy import Connection, Engine, text

from app.models import QUEUE_BLOCK_BITS

TRIGGER_NAMES = (
    "tw_sentence_counts_insert",
    "tw_sentence_counts_delete",
    "tw_sentence_counts_update",
    "tw_queue_counts_assign_insert",
    "tw_queue_counts_assign_delete",
    "tw_queue_counts_assign_update",
    "tw_queue_counts_ann_insert",
    "tw_queue_counts_ann_delete",
    "tw_queue_counts_ann_update",
    "tw_queue_counts_sentence_state",
    "tw_queue_counts_sentence_delete",
    "tw_mshard_corpus_insert",
    "tw_mshard_record_insert",
    "tw_mshard_record_delete",
    "tw_mshard_sentence_state",
    "tw_mshard_sentence_delete",
    "tw_mshard_ann_insert",
    "tw_mshard_ann_update",
    "tw_mshard_ann_delete",
    "tw_queue_blocks_insert",
    "tw_queue_blocks_delete",
    "tw_queue_blocks_update",
    "tw_hidden_record_insert",
    "tw_hidden_record_delete",
    "tw_hidden_assign_insert",
    "tw_hidden_assign_delete",
    "tw_hidden_assign_update",
    "tw_hidden_ann_insert",
    "tw_hidden_ann_delete",
    "tw_hidden_ann_update",
)

_ADD = (
    "INSERT INTO sentence_counts (corpus_id, document_id, state, n) "
    "VALUES ({r}.corpus_id, {r}.document_id, {r}.state, 1) "
    "ON CONFLICT (document_id, state) DO UPDATE SET n = sentence_counts.n + 1"
)
_REMOVE = (
    "UPDATE sentence_counts SET n = n - 1 WHERE document_id = {r}.document_id AND state = {r}.state"
)

# queue_counts: {r} is NEW or OLD
_SUBMITTED_OF = (
    "(SELECT COUNT(*) FROM annotations WHERE sentence_id = {r}.sentence_id "
    "AND user_id = {r}.user_id AND state = 'submitted')"
)
_DROPPED_OF = "(SELECT COUNT(*) FROM sentences WHERE id = {r}.sentence_id AND state = 'dropped')"
# A count row of a corpus or user being removed is left alone (the cascade removes it next;
# PostgreSQL would otherwise check its foreign keys against the row already gone).
_ALIVE = (
    " AND EXISTS (SELECT 1 FROM corpora WHERE corpora.id = queue_counts.corpus_id)"
    " AND EXISTS (SELECT 1 FROM users WHERE users.id = queue_counts.user_id)"
)
_Q_ADD = (
    "INSERT INTO queue_counts (user_id, corpus_id, assigned, submitted, dropped) "
    "VALUES ({r}.user_id, {r}.corpus_id, 1, " + _SUBMITTED_OF + ", " + _DROPPED_OF + ") "
    "ON CONFLICT (user_id, corpus_id) DO UPDATE SET assigned = queue_counts.assigned + 1, "
    "submitted = queue_counts.submitted + excluded.submitted, "
    "dropped = queue_counts.dropped + excluded.dropped"
)
_Q_REMOVE = (
    "UPDATE queue_counts SET assigned = assigned - 1, submitted = submitted - "
    + _SUBMITTED_OF
    + ", dropped = dropped - "
    + _DROPPED_OF
    + " WHERE user_id = {r}.user_id AND corpus_id = {r}.corpus_id"
    + _ALIVE
)
_Q_ANN = (
    "UPDATE queue_counts SET submitted = submitted {sign} 1 WHERE {r}.state = 'submitted' "
    "AND user_id = {r}.user_id AND corpus_id = (SELECT corpus_id FROM assignments "
    "WHERE sentence_id = {r}.sentence_id AND user_id = {r}.user_id)" + _ALIVE
)
_Q_DROP = (
    "UPDATE queue_counts SET dropped = dropped + ({delta}) WHERE (user_id, corpus_id) IN "
    "(SELECT user_id, corpus_id FROM assignments WHERE sentence_id = {r}.id)" + _ALIVE
)
_TO_DROPPED = "CASE WHEN NEW.state = 'dropped' THEN 1 ELSE -1 END"

# figure_mark_shards: {r} is NEW or OLD; {shard} the writer's shard (_SHARD)
_M_COLUMNS = "(corpus_id, shard, agreement_records, agreement_changes, handed_in_changes)"
_M_ADD = (
    " ON CONFLICT (corpus_id, shard) DO UPDATE SET "
    "agreement_records = figure_mark_shards.agreement_records + excluded.agreement_records, "
    "agreement_changes = figure_mark_shards.agreement_changes + excluded.agreement_changes, "
    "handed_in_changes = figure_mark_shards.handed_in_changes + excluded.handed_in_changes"
)
_M_CORPUS = (
    f"INSERT INTO figure_mark_shards {_M_COLUMNS} VALUES (NEW.id, 0, 0, 0, 0) "
    "ON CONFLICT (corpus_id, shard) DO NOTHING"
)
_M_RECORD = (
    f"INSERT INTO figure_mark_shards {_M_COLUMNS} "
    "VALUES ({r}.corpus_id, {shard}, {sign}1, {changed}, 0)" + _M_ADD
)
_M_SENTENCE = (
    f"INSERT INTO figure_mark_shards {_M_COLUMNS} "
    "VALUES ({r}.corpus_id, {shard}, 0, 1, 1)" + _M_ADD
)
# (no row when the sentence is gone: its removal counted the change)
_M_ANN = (
    f"INSERT INTO figure_mark_shards {_M_COLUMNS} "
    "SELECT s.corpus_id, {shard}, 0, 0, 1 FROM sentences s WHERE s.id = {r}.sentence_id" + _M_ADD
)
#: The shard a writer's changes go to: on PostgreSQL one of 64 by server process, so that
#: hand-ins of one corpus in different connections mostly update different rows; SQLite
#: serializes every write anyway (one row).
_SHARDS = 64
_SHARD = {"sqlite": "0", "postgresql": f"(pg_backend_pid() % {_SHARDS})"}
_S0 = _SHARD["sqlite"]
# queue_blocks: {r} is NEW or OLD
_B_ADD = (
    "INSERT INTO queue_blocks (user_id, corpus_id, block, n) "
    "VALUES ({r}.user_id, {r}.corpus_id, {r}.rank >> " + str(QUEUE_BLOCK_BITS) + ", 1) "
    "ON CONFLICT (user_id, corpus_id, block) DO UPDATE SET n = queue_blocks.n + 1"
)
_B_REMOVE = (
    "UPDATE queue_blocks SET n = n - 1 WHERE user_id = {r}.user_id "
    "AND corpus_id = {r}.corpus_id AND block = {r}.rank >> " + str(QUEUE_BLOCK_BITS)
)
# hidden_sentences: {r} is NEW or OLD (of assignments or annotations: the row of that user
# and sentence worked out again), or of agreement_records
_H_UNFINISHED = (
    "(EXISTS (SELECT 1 FROM assignments a WHERE a.sentence_id = {s} AND a.user_id = {u}) "
    "OR EXISTS (SELECT 1 FROM annotations n WHERE n.sentence_id = {s} AND n.user_id = {u})) "
    "AND NOT EXISTS (SELECT 1 FROM annotations n WHERE n.sentence_id = {s} "
    "AND n.user_id = {u} AND n.state = 'submitted')"
)
_H_FORGET = (
    "DELETE FROM hidden_sentences WHERE user_id = {r}.user_id AND sentence_id = {r}.sentence_id"
)
_H_WORK_OUT = (
    "INSERT INTO hidden_sentences (user_id, corpus_id, sentence_id) "
    "SELECT DISTINCT {r}.user_id, c.corpus_id, {r}.sentence_id FROM agreement_records c "
    "WHERE c.sentence_id = {r}.sentence_id AND "
    + _H_UNFINISHED.format(s="{r}.sentence_id", u="{r}.user_id")
    + " ON CONFLICT (user_id, corpus_id, sentence_id) DO NOTHING"
)
_H_RECORD_INSERT = (
    "INSERT INTO hidden_sentences (user_id, corpus_id, sentence_id) "
    "SELECT w.user_id, NEW.corpus_id, NEW.sentence_id FROM (SELECT user_id FROM assignments "
    "WHERE sentence_id = NEW.sentence_id UNION SELECT user_id FROM annotations "
    "WHERE sentence_id = NEW.sentence_id) w WHERE NOT EXISTS (SELECT 1 FROM annotations n "
    "WHERE n.sentence_id = NEW.sentence_id AND n.user_id = w.user_id AND n.state = 'submitted') "
    "ON CONFLICT (user_id, corpus_id, sentence_id) DO NOTHING"
)
_H_RECORD_DELETE = (
    "DELETE FROM hidden_sentences WHERE sentence_id = OLD.sentence_id AND NOT EXISTS "
    "(SELECT 1 FROM agreement_records c WHERE c.sentence_id = OLD.sentence_id)"
)
_WAS_DROPPED = "(OLD.state = 'dropped') <> (NEW.state = 'dropped')"
_HANDED_IN = "(OLD.state = 'submitted' OR NEW.state = 'submitted')"

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
    "CREATE TRIGGER IF NOT EXISTS tw_queue_counts_assign_insert AFTER INSERT ON assignments "
    f"BEGIN {_Q_ADD.format(r='NEW')}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_queue_counts_assign_delete AFTER DELETE ON assignments "
    f"BEGIN {_Q_REMOVE.format(r='OLD')}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_queue_counts_assign_update "
    "AFTER UPDATE OF user_id, corpus_id, sentence_id ON assignments "
    f"BEGIN {_Q_REMOVE.format(r='OLD')}; {_Q_ADD.format(r='NEW')}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_queue_counts_ann_insert AFTER INSERT ON annotations "
    f"BEGIN {_Q_ANN.format(r='NEW', sign='+')}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_queue_counts_ann_delete AFTER DELETE ON annotations "
    f"BEGIN {_Q_ANN.format(r='OLD', sign='-')}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_queue_counts_ann_update "
    "AFTER UPDATE OF state, sentence_id, user_id ON annotations "
    f"BEGIN {_Q_ANN.format(r='OLD', sign='-')}; {_Q_ANN.format(r='NEW', sign='+')}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_queue_counts_sentence_state AFTER UPDATE OF state "
    "ON sentences WHEN (OLD.state = 'dropped') <> (NEW.state = 'dropped') "
    f"BEGIN {_Q_DROP.format(r='NEW', delta=_TO_DROPPED)}; END",
    # before the row goes: its assignments' cascade then finds no dropped sentence to count
    "CREATE TRIGGER IF NOT EXISTS tw_queue_counts_sentence_delete BEFORE DELETE ON sentences "
    f"WHEN OLD.state = 'dropped' BEGIN {_Q_DROP.format(r='OLD', delta='-1')}; END",
    f"CREATE TRIGGER IF NOT EXISTS tw_mshard_corpus_insert AFTER INSERT ON corpora "
    f"BEGIN {_M_CORPUS}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_mshard_record_insert AFTER INSERT ON agreement_records "
    f"BEGIN {_M_RECORD.format(r='NEW', sign='', changed=0, shard=_S0)}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_mshard_record_delete AFTER DELETE ON agreement_records "
    f"BEGIN {_M_RECORD.format(r='OLD', sign='-', changed=1, shard=_S0)}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_mshard_sentence_state AFTER UPDATE OF state ON sentences "
    f"WHEN {_WAS_DROPPED} BEGIN {_M_SENTENCE.format(r='NEW', shard=_S0)}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_mshard_sentence_delete AFTER DELETE ON sentences "
    f"BEGIN {_M_SENTENCE.format(r='OLD', shard=_S0)}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_mshard_ann_insert AFTER INSERT ON annotations "
    f"WHEN NEW.state = 'submitted' BEGIN {_M_ANN.format(r='NEW', shard=_S0)}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_mshard_ann_update AFTER UPDATE ON annotations "
    f"WHEN {_HANDED_IN} BEGIN {_M_ANN.format(r='OLD', shard=_S0)}; "
    f"{_M_ANN.format(r='NEW', shard=_S0)}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_mshard_ann_delete AFTER DELETE ON annotations "
    f"WHEN OLD.state = 'submitted' BEGIN {_M_ANN.format(r='OLD', shard=_S0)}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_queue_blocks_insert AFTER INSERT ON assignments "
    f"BEGIN {_B_ADD.format(r='NEW')}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_queue_blocks_delete AFTER DELETE ON assignments "
    f"BEGIN {_B_REMOVE.format(r='OLD')}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_queue_blocks_update "
    "AFTER UPDATE OF user_id, corpus_id, rank ON assignments "
    f"BEGIN {_B_REMOVE.format(r='OLD')}; {_B_ADD.format(r='NEW')}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_hidden_record_insert AFTER INSERT ON agreement_records "
    f"BEGIN {_H_RECORD_INSERT}; END",
    "CREATE TRIGGER IF NOT EXISTS tw_hidden_record_delete AFTER DELETE ON agreement_records "
    f"BEGIN {_H_RECORD_DELETE}; END",
]
for _table, _short, _columns in (
    ("assignments", "assign", "user_id, sentence_id"),
    ("annotations", "ann", "user_id, sentence_id, state"),
):
    _SQLITE += [
        f"CREATE TRIGGER IF NOT EXISTS tw_hidden_{_short}_insert AFTER INSERT ON {_table} "
        f"BEGIN {_H_FORGET.format(r='NEW')}; {_H_WORK_OUT.format(r='NEW')}; END",
        f"CREATE TRIGGER IF NOT EXISTS tw_hidden_{_short}_delete AFTER DELETE ON {_table} "
        f"BEGIN {_H_FORGET.format(r='OLD')}; {_H_WORK_OUT.format(r='OLD')}; END",
        f"CREATE TRIGGER IF NOT EXISTS tw_hidden_{_short}_update "
        f"AFTER UPDATE OF {_columns} ON {_table} "
        f"BEGIN {_H_FORGET.format(r='OLD')}; {_H_WORK_OUT.format(r='OLD')}; "
        f"{_H_FORGET.format(r='NEW')}; {_H_WORK_OUT.format(r='NEW')}; END",
    ]


def _row_function(name: str, on_old: str, on_new: str) -> str:
    """A PostgreSQL row trigger function: ``on_old`` for a deleted or changed row's old
    version, ``on_new`` for an inserted or changed row's new one."""
    return f"""CREATE OR REPLACE FUNCTION {name}() RETURNS trigger AS $$
BEGIN
  IF TG_OP = 'DELETE' OR TG_OP = 'UPDATE' THEN
    {on_old};
  END IF;
  IF TG_OP = 'INSERT' OR TG_OP = 'UPDATE' THEN
    {on_new};
  END IF;
  RETURN NULL;
END $$ LANGUAGE plpgsql"""


_POSTGRES = [
    _row_function("tw_sentence_counts", _REMOVE.format(r="OLD"), _ADD.format(r="NEW")),
    "DROP TRIGGER IF EXISTS tw_sentence_counts_insert ON sentences",
    "CREATE TRIGGER tw_sentence_counts_insert AFTER INSERT OR DELETE ON sentences "
    "FOR EACH ROW EXECUTE FUNCTION tw_sentence_counts()",
    "DROP TRIGGER IF EXISTS tw_sentence_counts_update ON sentences",
    "CREATE TRIGGER tw_sentence_counts_update AFTER UPDATE OF state, document_id, corpus_id "
    "ON sentences FOR EACH ROW WHEN (OLD.state IS DISTINCT FROM NEW.state "
    "OR OLD.document_id IS DISTINCT FROM NEW.document_id "
    "OR OLD.corpus_id IS DISTINCT FROM NEW.corpus_id) EXECUTE FUNCTION tw_sentence_counts()",
    _row_function("tw_queue_counts_assign", _Q_REMOVE.format(r="OLD"), _Q_ADD.format(r="NEW")),
    _row_function(
        "tw_queue_counts_ann", _Q_ANN.format(r="OLD", sign="-"), _Q_ANN.format(r="NEW", sign="+")
    ),
    f"""CREATE OR REPLACE FUNCTION tw_queue_counts_sentence() RETURNS trigger AS $$
BEGIN
  IF TG_OP = 'DELETE' THEN
    IF OLD.state = 'dropped' THEN
      {_Q_DROP.format(r="OLD", delta="-1")};
    END IF;
    RETURN OLD;
  END IF;
  {_Q_DROP.format(r="NEW", delta=_TO_DROPPED)};
  RETURN NULL;
END $$ LANGUAGE plpgsql""",
    "DROP TRIGGER IF EXISTS tw_queue_counts_assign ON assignments",
    "CREATE TRIGGER tw_queue_counts_assign AFTER INSERT OR DELETE OR UPDATE OF user_id, "
    "corpus_id, sentence_id ON assignments FOR EACH ROW EXECUTE FUNCTION tw_queue_counts_assign()",
    "DROP TRIGGER IF EXISTS tw_queue_counts_ann ON annotations",
    "CREATE TRIGGER tw_queue_counts_ann AFTER INSERT OR DELETE OR UPDATE OF state, "
    "sentence_id, user_id ON annotations FOR EACH ROW EXECUTE FUNCTION tw_queue_counts_ann()",
    "DROP TRIGGER IF EXISTS tw_queue_counts_sentence_state ON sentences",
    "CREATE TRIGGER tw_queue_counts_sentence_state AFTER UPDATE OF state ON sentences "
    "FOR EACH ROW WHEN ((OLD.state = 'dropped') IS DISTINCT FROM (NEW.state = 'dropped')) "
    "EXECUTE FUNCTION tw_queue_counts_sentence()",
    "DROP TRIGGER IF EXISTS tw_queue_counts_sentence_delete ON sentences",
    "CREATE TRIGGER tw_queue_counts_sentence_delete BEFORE DELETE ON sentences "
    "FOR EACH ROW EXECUTE FUNCTION tw_queue_counts_sentence()",
]
_POSTGRES += [
    f"""CREATE OR REPLACE FUNCTION tw_mshard_corpus() RETURNS trigger AS $$
BEGIN
  {_M_CORPUS};
  RETURN NULL;
END $$ LANGUAGE plpgsql""",
    _row_function(
        "tw_mshard_record",
        _M_RECORD.format(r="OLD", sign="-", changed=1, shard=_SHARD["postgresql"]),
        _M_RECORD.format(r="NEW", sign="", changed=0, shard=_SHARD["postgresql"]),
    ),
    _row_function(
        "tw_mshard_sentence", _M_SENTENCE.format(r="OLD", shard=_SHARD["postgresql"]), "PERFORM 1"
    ),
    f"""CREATE OR REPLACE FUNCTION tw_mshard_ann() RETURNS trigger AS $$
BEGIN
  IF (TG_OP = 'DELETE' OR TG_OP = 'UPDATE') AND OLD.state = 'submitted' THEN
    {_M_ANN.format(r="OLD", shard=_SHARD["postgresql"])};
  END IF;
  IF (TG_OP = 'INSERT' OR TG_OP = 'UPDATE') AND NEW.state = 'submitted' THEN
    {_M_ANN.format(r="NEW", shard=_SHARD["postgresql"])};
  END IF;
  RETURN NULL;
END $$ LANGUAGE plpgsql""",
    "DROP TRIGGER IF EXISTS tw_mshard_corpus_insert ON corpora",
    "CREATE TRIGGER tw_mshard_corpus_insert AFTER INSERT ON corpora "
    "FOR EACH ROW EXECUTE FUNCTION tw_mshard_corpus()",
    "DROP TRIGGER IF EXISTS tw_mshard_record ON agreement_records",
    "CREATE TRIGGER tw_mshard_record AFTER INSERT OR DELETE ON agreement_records "
    "FOR EACH ROW EXECUTE FUNCTION tw_mshard_record()",
    "DROP TRIGGER IF EXISTS tw_mshard_sentence_state ON sentences",
    "CREATE TRIGGER tw_mshard_sentence_state AFTER UPDATE OF state ON sentences "
    "FOR EACH ROW WHEN ((OLD.state = 'dropped') IS DISTINCT FROM (NEW.state = 'dropped')) "
    "EXECUTE FUNCTION tw_mshard_sentence()",
    "DROP TRIGGER IF EXISTS tw_mshard_sentence_delete ON sentences",
    "CREATE TRIGGER tw_mshard_sentence_delete AFTER DELETE ON sentences "
    "FOR EACH ROW EXECUTE FUNCTION tw_mshard_sentence()",
    "DROP TRIGGER IF EXISTS tw_mshard_ann ON annotations",
    "CREATE TRIGGER tw_mshard_ann AFTER INSERT OR DELETE OR UPDATE ON annotations "
    "FOR EACH ROW EXECUTE FUNCTION tw_mshard_ann()",
    _row_function("tw_queue_blocks", _B_REMOVE.format(r="OLD"), _B_ADD.format(r="NEW")),
    "DROP TRIGGER IF EXISTS tw_queue_blocks ON assignments",
    "CREATE TRIGGER tw_queue_blocks AFTER INSERT OR DELETE OR UPDATE OF user_id, corpus_id, "
    "rank ON assignments FOR EACH ROW EXECUTE FUNCTION tw_queue_blocks()",
]
_POSTGRES += [
    _row_function("tw_hidden_record", _H_RECORD_DELETE, _H_RECORD_INSERT),
    "DROP TRIGGER IF EXISTS tw_hidden_record ON agreement_records",
    "CREATE TRIGGER tw_hidden_record AFTER INSERT OR DELETE ON agreement_records "
    "FOR EACH ROW EXECUTE FUNCTION tw_hidden_record()",
    _row_function(
        "tw_hidden_work",
        f"{_H_FORGET.format(r='OLD')}; {_H_WORK_OUT.format(r='OLD')}",
        f"{_H_FORGET.format(r='NEW')}; {_H_WORK_OUT.format(r='NEW')}",
    ),
    "DROP TRIGGER IF EXISTS tw_hidden_assign ON assignments",
    "CREATE TRIGGER tw_hidden_assign AFTER INSERT OR DELETE OR UPDATE OF user_id, sentence_id "
    "ON assignments FOR EACH ROW EXECUTE FUNCTION tw_hidden_work()",
    "DROP TRIGGER IF EXISTS tw_hidden_ann ON annotations",
    "CREATE TRIGGER tw_hidden_ann AFTER INSERT OR DELETE OR UPDATE OF user_id, sentence_id, "
    "state ON annotations FOR EACH ROW EXECUTE FUNCTION tw_hidden_work()",
]
# PostgreSQL folds several events into one trigger; these are the names it uses.
_POSTGRES_NAMES = (
    "tw_sentence_counts_insert",
    "tw_sentence_counts_update",
    "tw_queue_counts_assign",
    "tw_queue_counts_ann",
    "tw_queue_counts_sentence_state",
    "tw_queue_counts_sentence_delete",
    "tw_mshard_corpus_insert",
    "tw_mshard_record",
    "tw_mshard_sentence_state",
    "tw_mshard_sentence_delete",
    "tw_mshard_ann",
    "tw_queue_blocks",
    "tw_hidden_record",
    "tw_hidden_assign",
    "tw_hidden_ann",
)


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
    conn.execute(text("DELETE FROM queue_counts"))
    conn.execute(
        text(
            "INSERT INTO queue_counts (user_id, corpus_id, assigned, submitted, dropped) "
            "SELECT a.user_id, a.corpus_id, COUNT(*), COUNT(n.id), "
            "SUM(CASE WHEN s.state = 'dropped' THEN 1 ELSE 0 END) "
            "FROM assignments a JOIN sentences s ON s.id = a.sentence_id "
            "LEFT JOIN annotations n ON n.sentence_id = a.sentence_id "
            "AND n.user_id = a.user_id AND n.state = 'submitted' "
            "GROUP BY a.user_id, a.corpus_id"
        )
    )
    conn.execute(text("DELETE FROM queue_blocks"))
    conn.execute(
        text(
            "INSERT INTO queue_blocks (user_id, corpus_id, block, n) "
            f"SELECT user_id, corpus_id, rank >> {QUEUE_BLOCK_BITS}, COUNT(*) FROM assignments "
            f"GROUP BY user_id, corpus_id, rank >> {QUEUE_BLOCK_BITS}"
        )
    )
    conn.execute(text("DELETE FROM hidden_sentences"))
    conn.execute(
        text(
            "INSERT INTO hidden_sentences (user_id, corpus_id, sentence_id) "
            "SELECT DISTINCT w.user_id, c.corpus_id, c.sentence_id FROM agreement_records c "
            "JOIN (SELECT user_id, sentence_id FROM assignments UNION "
            "SELECT user_id, sentence_id FROM annotations) w ON w.sentence_id = c.sentence_id "
            "WHERE NOT EXISTS (SELECT 1 FROM annotations n WHERE n.sentence_id = c.sentence_id "
            "AND n.user_id = w.user_id AND n.state = 'submitted')"
        )
    )
    # the change marks move on (never back): sums a process kept are then summed again, and
    # the sums kept in the database (made while a trigger may have been missing) go
    conn.execute(
        text(
            f"INSERT INTO figure_mark_shards {_M_COLUMNS} SELECT id, 0, 0, 0, 0 FROM corpora "
            "WHERE true ON CONFLICT (corpus_id, shard) DO NOTHING"
        )
    )
    conn.execute(
        text(
            "UPDATE figure_mark_shards SET agreement_records = CASE WHEN shard = 0 THEN "
            "(SELECT COUNT(*) FROM agreement_records r "
            "WHERE r.corpus_id = figure_mark_shards.corpus_id) ELSE 0 END, "
            "agreement_changes = agreement_changes + 1, handed_in_changes = handed_in_changes + 1"
        )
    )
    conn.execute(text("DELETE FROM kept_sums"))


def installed(conn: Connection) -> bool:
    """Whether every count trigger exists."""
    if conn.dialect.name == "sqlite":
        names = set(
            conn.execute(text("SELECT name FROM sqlite_master WHERE type = 'trigger'")).scalars()
        )
        return set(TRIGGER_NAMES) <= names
    names = set(
        conn.execute(
            text(
                "SELECT tgname FROM pg_trigger WHERE tgrelid IN ('sentences'::regclass, "
                "'assignments'::regclass, 'annotations'::regclass, "
                "'agreement_records'::regclass, 'corpora'::regclass)"
            )
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


_QUEUE_TRIGGERS_PG = {
    "tw_queue_counts_assign": "assignments",
    "tw_queue_counts_ann": "annotations",
    "tw_queue_counts_sentence_state": "sentences",
    "tw_queue_counts_sentence_delete": "sentences",
}


_MARK_TRIGGERS_PG = {
    "tw_mshard_corpus_insert": "corpora",
    "tw_mshard_record": "agreement_records",
    "tw_mshard_sentence_state": "sentences",
    "tw_mshard_sentence_delete": "sentences",
    "tw_mshard_ann": "annotations",
}


def _drop(
    conn: Connection, prefix: str, pg_triggers: dict[str, str], functions: tuple[str, ...]
) -> None:
    """Remove the triggers named ``prefix...`` (SQLite), or ``pg_triggers`` (name: table)
    and their ``functions`` (PostgreSQL)."""
    if conn.dialect.name == "sqlite":
        for name in TRIGGER_NAMES:
            if name.startswith(prefix):
                conn.execute(text(f"DROP TRIGGER IF EXISTS {name}"))
        return
    for name, table in pg_triggers.items():
        conn.execute(text(f"DROP TRIGGER IF EXISTS {name} ON {table}"))
    for function in functions:
        conn.execute(text(f"DROP FUNCTION IF EXISTS {function}()"))


def drop_mark_triggers(conn: Connection) -> None:
    """Remove the figure_mark_shards triggers (migration 0018's downgrade)."""
    _drop(
        conn,
        "tw_mshard",
        _MARK_TRIGGERS_PG,
        ("tw_mshard_corpus", "tw_mshard_record", "tw_mshard_sentence", "tw_mshard_ann"),
    )


def drop_single_mark_triggers(conn: Connection) -> None:
    """Remove the triggers of the one-row-per-corpus figure_marks (migration 0018's upgrade,
    0014's downgrade)."""
    if conn.dialect.name == "sqlite":
        for event in ("corpus_insert", "record_insert", "record_delete", "sentence_state"):
            conn.execute(text(f"DROP TRIGGER IF EXISTS tw_marks_{event}"))
        for event in ("sentence_delete", "ann_insert", "ann_update", "ann_delete"):
            conn.execute(text(f"DROP TRIGGER IF EXISTS tw_marks_{event}"))
        return
    for name, table in _MARK_TRIGGERS_PG.items():
        conn.execute(text(f"DROP TRIGGER IF EXISTS {name.replace('mshard', 'marks')} ON {table}"))
    for function in ("corpus", "record", "sentence", "ann"):
        conn.execute(text(f"DROP FUNCTION IF EXISTS tw_marks_{function}()"))


def drop_hidden_triggers(conn: Connection) -> None:
    """Remove the hidden_sentences triggers (migration 0017's downgrade)."""
    _drop(
        conn,
        "tw_hidden",
        {
            "tw_hidden_record": "agreement_records",
            "tw_hidden_assign": "assignments",
            "tw_hidden_ann": "annotations",
        },
        ("tw_hidden_record", "tw_hidden_work"),
    )


def drop_block_triggers(conn: Connection) -> None:
    """Remove the queue_blocks triggers (migration 0015's downgrade)."""
    _drop(conn, "tw_queue_blocks", {"tw_queue_blocks": "assignments"}, ("tw_queue_blocks",))


def drop_queue_triggers(conn: Connection) -> None:
    """Remove the queue_counts triggers (migration 0012's downgrade)."""
    _drop(
        conn,
        "tw_queue_counts",
        _QUEUE_TRIGGERS_PG,
        ("tw_queue_counts_assign", "tw_queue_counts_ann", "tw_queue_counts_sentence"),
    )


def drop_triggers(conn: Connection) -> None:
    """Remove the sentence count triggers (migration 0005's downgrade)."""
    _drop(
        conn,
        "tw_sentence_counts",
        {"tw_sentence_counts_insert": "sentences", "tw_sentence_counts_update": "sentences"},
        ("tw_sentence_counts",),
    )
