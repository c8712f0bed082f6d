"""Lazy, need-ordered refresh of suggestions after a new grammar version becomes active.

What it computes
    :func:`refresh_step` parses, under the corpus's active grammar, the sentences annotators
    will open next: the first ``refresh_lookahead`` (corpus setting) open sentences of each
    annotator's queue, taken round-robin (everyone's next sentence, then everyone's second...)
    and skipping those that already have a complete suggestion of the active version. Every
    other sentence is parsed when somebody opens it (:func:`app.services.suggestions.
    suggestion_for`, through the parse admission pool), so no sentence is ever shown a
    suggestion of an inactive version (the Bench marks a row of another version ``stale``
    should one ever reach it). A sentence whose start is already fixed keeps that start
    (:func:`app.services.suggestions.fixed_start`); the look-ahead only fills its readings.

The bound (:func:`refresh_budget`)
    Parses per grammar version never exceed the smaller of

    * ``refresh_lookahead`` x the annotators with open work in the corpus, and
    * the annotations the team makes before the next automatic retraining: the retraining
      interval (``retrain_every``, or ``retrain_every_early`` while gold is scarce) times
      ``annotators_per_sentence``. Each annotation opens at most one sentence, so parsing more
      ahead than that is work nobody would look at before the next grammar replaces it.

    What a version has spent is kept in its ``options["refresh"]`` (``parsed``, ``budget``,
    ``seconds``), so calling :func:`refresh_step` again (a runner, after a restart) parses
    only what is left of the budget, for the look-ahead as it stands then.

Where it runs
    A plain service function: the training job calls it once a version is active, and any
    runner (the in-process one, a distributed worker) may call it again with the same
    result. Parses are spread over processes (:func:`parser.batch.parse_many`) up to the
    parse admission's slots (:func:`app.services.admission.parallel_parses`), one numba
    thread each, so a background refresh never runs more parse threads than the cores.

After a hand-in
    The look-ahead moves as annotators work: :func:`refresh_after_hand_in` (run by the Bench's
    hand-in after its response is sent) parses the next ``refresh_lookahead`` open sentences
    of that annotator's queue that lack a complete suggestion of the active version, usually
    the one sentence that just came into the window. It goes through the parse admission pool
    like a page's parse, so it never runs more parses at once than the pool allows, and it
    stops as soon as anybody is waiting in the pool's line: people at a page come first. Its
    parses are the ones the annotator's next openings would otherwise wait for.

Cost: one query per annotator for the look-ahead (an index walk of ``ix_assignments_queue``),
then one complete parse (k-best with posteriors) per sentence refreshed, committed in batches.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

from sqlalchemy import func, select, update
from sqlalchemy.orm import Session, sessionmaker

from app.corpus_settings import retrain_interval
from app.models import (
    SENT_GOLD,
    SENT_IN_PROGRESS,
    SENT_QUEUED,
    Assignment,
    Corpus,
    GrammarVersion,
    Sentence,
    SentenceCount,
    Suggestion,
)
from app.services.admission import admission, parallel_parses
from app.services.errors import ServiceError
from app.services.queue_order import unfinished
from app.services.suggestions import (
    active_version,
    grammar_for,
    suggestion_for,
    suggestion_values,
    too_long,
)
from app.services.validation import stored_words
from parser.batch import parse_many

#: Sentences parsed between two commits (an interrupted refresh keeps what it finished).
BATCH = 64
#: Fewest sentences one worker process is given: fewer than two such chunks are parsed in
#: this process, since starting a worker costs about a second (parser.batch).
MIN_CHUNK = 8
OPEN_STATES = (SENT_QUEUED, SENT_IN_PROGRESS)


@dataclass(frozen=True)
class RefreshReport:
    """What one :func:`refresh_step` did: ``parsed`` now, ``spent`` by the version in all,
    its ``budget``, the ``wanted`` look-ahead sentences that lacked a suggestion, and the
    wall ``seconds`` of this step."""

    version_id: int | None
    parsed: int
    spent: int
    budget: int
    wanted: int
    seconds: float

    def summary(self) -> str:
        return (
            f"new suggestions for {self.parsed} sentences next in the annotators' queues "
            f"({self.spent} of at most {self.budget} for this version; the rest when opened)"
        )


def annotators_with_open_work(db: Session, corpus_id: int) -> list[int]:
    """Ids of the users with at least one open, unfinished sentence assigned in the corpus."""
    rows = db.scalars(
        unfinished(select(Assignment.user_id).join(Sentence, Sentence.id == Assignment.sentence_id))
        .where(Assignment.corpus_id == corpus_id, Sentence.state.in_(OPEN_STATES))
        .distinct()
        .order_by(Assignment.user_id)
    ).all()
    return list(rows)


def gold_sentences(db: Session, corpus_id: int) -> int:
    """Gold sentences of the corpus, from the counts the database triggers keep."""
    total = db.scalar(
        select(func.sum(SentenceCount.n)).where(
            SentenceCount.corpus_id == corpus_id, SentenceCount.state == SENT_GOLD
        )
    )
    return int(total or 0)


def refresh_budget(db: Session, corpus: Corpus, annotators: int | None = None) -> int:
    """Most sentences parsed ahead per grammar version (see the module docstring)."""
    options = corpus.options
    if annotators is None:
        annotators = len(annotators_with_open_work(db, corpus.id))
    ahead = options.refresh_lookahead * annotators
    interval = retrain_interval(options, gold_sentences(db, corpus.id))
    if interval > 0:
        return min(ahead, interval * options.annotators_per_sentence)
    return ahead


def lookahead(db: Session, corpus: Corpus, user_ids: list[int], per_user: int) -> list[int]:
    """The next ``per_user`` open sentences of each user's queue in the corpus, round-robin
    (everyone's first, then everyone's second...), each sentence once."""
    queues: list[list[int]] = []
    for uid in user_ids:
        queues.append(
            list(
                db.scalars(
                    unfinished(
                        select(Assignment.sentence_id).join(
                            Sentence, Sentence.id == Assignment.sentence_id
                        )
                    )
                    .where(
                        Assignment.user_id == uid,
                        Assignment.corpus_id == corpus.id,
                        Sentence.state.in_(OPEN_STATES),
                    )
                    .order_by(Assignment.rank, Assignment.sentence_id)
                    .limit(per_user)
                )
            )
        )
    order: dict[int, None] = {}
    for place in range(per_user):
        for queue in queues:
            if place < len(queue):
                order.setdefault(queue[place], None)
    return list(order)


def _complete_under(db: Session, sentence_ids: list[int], version_id: int) -> set[int]:
    """Which of the sentences already have a complete suggestion of the version."""
    if not sentence_ids:
        return set()
    rows = db.execute(
        select(Suggestion.sentence_id, Suggestion.posteriors, Suggestion.fallback).where(
            Suggestion.grammar_version_id == version_id, Suggestion.sentence_id.in_(sentence_ids)
        )
    ).all()
    return {sid for sid, posteriors, fallback in rows if posteriors or fallback}


def _spent(version: GrammarVersion) -> int:
    return int(((version.options or {}).get("refresh") or {}).get("parsed", 0))


def refresh_step(
    db: Session,
    corpus: Corpus,
    budget: int | None = None,
    *,
    k: int = 5,
    processes: int | None = None,
) -> RefreshReport:
    """Parse the look-ahead under the active version, within what is left of ``budget``
    (default :func:`refresh_budget`) after the version's earlier steps. Commits after each
    batch and records the spending on the version. ``processes`` defaults to the admission
    pool's parallel parses."""
    t0 = time.perf_counter()
    version = active_version(db, corpus)
    if version is None:
        return RefreshReport(None, 0, 0, 0, 0, 0.0)
    users = annotators_with_open_work(db, corpus.id)
    if budget is None:
        budget = refresh_budget(db, corpus, annotators=len(users))
    spent = _spent(version)
    wanted_ids = lookahead(db, corpus, users, corpus.options.refresh_lookahead)
    have = _complete_under(db, wanted_ids, version.id)
    missing = [sid for sid in wanted_ids if sid not in have]
    todo_ids = missing[: max(0, budget - spent)]
    sentences = {s.id: s for s in db.scalars(select(Sentence).where(Sentence.id.in_(todo_ids)))}
    todo = [sentences[sid] for sid in todo_ids if not too_long(stored_words(sentences[sid]))]
    parsed = 0
    if todo:
        grammar = grammar_for(db, version.id)
        workers = processes or parallel_parses()
        for at in range(0, len(todo), BATCH):
            t_batch = time.perf_counter()
            part = todo[at : at + BATCH]
            results = parse_many(
                grammar,
                [stored_words(s) for s in part],
                k=k,
                posteriors=True,
                processes=workers,
                chunk=max(MIN_CHUNK, math.ceil(len(part) / (2 * workers))),
                threads=1,
            )
            have_now = _complete_under(db, [s.id for s in part], version.id)
            for sentence, result in zip(part, results, strict=True):
                if sentence.id in have_now:  # opened meanwhile: parsed on demand already
                    continue
                values = suggestion_values(result)
                row = db.scalar(
                    select(Suggestion).where(
                        Suggestion.sentence_id == sentence.id,
                        Suggestion.grammar_version_id == version.id,
                    )
                )
                if row is None:
                    db.add(
                        Suggestion(sentence_id=sentence.id, grammar_version_id=version.id, **values)
                    )
                else:  # a fast row (trees only): complete it in place
                    for key, value in values.items():
                        setattr(row, key, value)
                parsed += 1
            _record(db, version, parsed_now=len(part), budget=budget, since=t_batch)
            db.commit()
    else:
        _record(db, version, parsed_now=0, budget=budget, since=t0)
        db.commit()
    return RefreshReport(
        version.id,
        parsed,
        spent + len(todo),
        budget,
        len(missing),
        round(time.perf_counter() - t0, 3),
    )


def _record(
    db: Session, version: GrammarVersion, *, parsed_now: int, budget: int, since: float
) -> None:
    """Add a batch's parses and its time (from ``since``) to the version's
    ``options["refresh"]`` (does not commit)."""
    db.refresh(version, ["options"])
    options = dict(version.options or {})
    before = options.get("refresh") or {}
    options["refresh"] = {
        "parsed": int(before.get("parsed", 0)) + parsed_now,
        "budget": budget,
        "seconds": round(float(before.get("seconds", 0.0)) + time.perf_counter() - since, 3),
    }
    db.execute(
        update(GrammarVersion).where(GrammarVersion.id == version.id).values(options=options)
    )


def refresh_after_hand_in(
    factory: sessionmaker[Session], corpus_id: int, user_id: int, *, k: int = 5
) -> int:
    """Parse the next open sentences of ``user_id``'s queue in the corpus (at most the
    corpus's ``refresh_lookahead``) that lack a complete suggestion of the active version,
    one at a time through the parse admission pool, stopping when anybody waits in its line
    (see the module docstring). Opens its own session (it runs after the request's); commits
    each suggestion. Returns how many sentences it parsed."""
    with factory() as db:
        corpus = db.get(Corpus, corpus_id)
        if corpus is None:
            return 0
        version = active_version(db, corpus)
        if version is None:
            return 0
        wanted = lookahead(db, corpus, [user_id], corpus.options.refresh_lookahead)
        have = _complete_under(db, wanted, version.id)
        parsed = 0
        for sentence_id in wanted:
            if sentence_id in have:
                continue
            if admission().waiting:  # a page is waiting for the parser: it comes first
                break
            sentence = db.get(Sentence, sentence_id)
            if sentence is None or too_long(stored_words(sentence)):
                continue
            try:
                if suggestion_for(db, sentence, corpus, k, complete=True) is not None:
                    parsed += 1
            except ServiceError:  # the pool is busy or the grammar changed: openings parse
                db.rollback()
                break
        return parsed
