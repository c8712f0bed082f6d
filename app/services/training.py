"""The gold loop: train the next grammar version of a corpus on its gold, in the background.

What it computes
    A *job* is a GrammarVersion row. It is queued (status ``queued``) either on demand
    (:func:`schedule_training`, the Grammars page's button) or by :func:`queue_if_due` when the
    corpus has ``retrain_every`` (corpus setting) more current gold trees than it had when the
    latest version was queued. A runner claims queued rows one at a time
    (``UPDATE ... WHERE status = 'queued'``, so two runners never take the same row) and runs
    :func:`run_version`:

    1. read every current gold tree of the corpus (imported seed gold included), in sentence-id
       order; a tree's root is normalised to ``ROOT`` (an empty or TOP wrapper is renamed, any
       other root gets a ROOT above it) because the grammar needs one root label;
    2. hold out the gold of every sentence whose ``id % heldout_every == 0`` (corpus setting).
       Keyed on the sentence id, not on the position in the list, so a sentence held out once
       stays held out while gold grows, and versions are scored on nested slices;
    3. train a grammar on the rest (parser.grammar.train_grammar, default markovization),
       parse the words of a bounded random sample of the held-out trees with it (at most
       ``heldout_sample``, corpus setting; app.services.heldout_gate), in parallel worker
       processes (parser.batch.parse_many, up to the parse admission's bound), taking the
       consensus tree new annotations start from, and score the parses against the held-out
       gold with PARSEVAL (parser.scoring.score_corpus, default conventions):
       ``heldout_f1``, with its 95% bootstrap interval over sentences
       (parser.interval.f1_interval) and the per-sentence counts in
       ``options["heldout"]``;
    4. train the grammar that is stored and used on *all* gold, held-out slice included. The
       held-out F1 is then an estimate for a grammar trained on slightly less data (a
       ``1/heldout_every`` share less); we accept that small pessimism because every version is
       measured the same way and the suggestions get all the gold there is;
    5. make the version active unless its held-out F1 is lower than the active version's by
       more than ``max_f1_drop`` (corpus setting) beyond the sampling noise (the rule is in
       app.services.heldout_gate; ``options["gate"]`` records it): then its status is
       ``rejected`` (the grammar is still stored; nothing is thrown away);
    6. let go of older suggestions (app.services.suggestions.prune) and parse the next
       sentences of each annotator's queue under the new version, a bounded look-ahead
       (app.services.refresh.refresh_step); every other sentence is parsed when opened.
    A finished version (ready or rejected) also queues a run of the inconsistency finder
    (app.services.findings), which the same worker drains after the grammar jobs.

    Progress (0..1) and a message are written to the row as the job goes; ``train_seconds`` is
    the wall time of steps 1-5 and ``options["timing"]`` splits it.

Where jobs run
    A :class:`TrainingRunner` per app (``app.state.training_runner``) owns an executor with one
    worker: a separate process (``ProcessPoolExecutor``, spawn start method, so the web
    process's threads and connections are not forked) or, with the setting
    ``training_in_process`` (tests), a thread. The web process only submits a "drain the
    queue" call, which takes microseconds; the worker does all the reading, training, parsing
    and writing with its own database connection. Only one job per corpus is queued or
    training at a time; a runner runs one job at a time overall.

    A job queued inside a request's transaction (a settle, or a submit that made gold) starts
    after that transaction commits: a SQLAlchemy ``after_commit`` hook kicks the runner
    registered for the session's engine. A runner that starts (first use, or service start)
    marks rows left in ``training`` by a dead process as failed, then drains the queue.

    Each job has an owner: the host and process id that claimed it, and a heartbeat the
    process writes every HEARTBEAT_SECONDS while it trains. A job is failed as interrupted
    only when its owner is gone: no heartbeat for STALE_AFTER seconds, or (same host) its
    process has ended. So a worker that restarts under ``serve --workers N`` leaves the other
    workers' running jobs alone.

Complexity: training is linear in the gold tree nodes; held-out scoring costs one CKY parse
per sampled held-out tree (O(n^3) each, at most ``heldout_sample`` of them, spread over the
cores the parse admission allows), which dominates on large corpora.
Limits: one process trains at a time; a job cannot be cancelled once it runs.
"""

from __future__ import annotations

import logging
import math
import multiprocessing
import os
import tempfile
import threading
import time
import weakref
from collections.abc import Callable, Sequence
from concurrent.futures import Executor, Future, ProcessPoolExecutor, ThreadPoolExecutor
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any, Protocol, cast

from nltk import Tree
from sqlalchemy import CursorResult, Engine, event, func, select, update
from sqlalchemy.engine import make_url
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session, sessionmaker

from app.corpus_settings import AUTO_WEIGHT, QueueOrder
from app.corpus_settings import retrain_interval as retrain_interval  # re-exported
from app.db import make_engine, make_sessionmaker
from app.models import (
    GV_FAILED,
    GV_QUEUED,
    GV_READY,
    GV_REJECTED,
    GV_TRAINING,
    SENT_IN_PROGRESS,
    SENT_QUEUED,
    Corpus,
    Event,
    Gold,
    GrammarVersion,
    ReferenceSet,
    Sentence,
    utcnow,
)
from app.services import owners
from app.services import refinement as refinement_choice
from app.services.admission import configure_from as configure_admission
from app.services.admission import parallel_parses
from app.services.errors import Conflict, NotFound
from app.services.findings import claim_run as claim_findings
from app.services.findings import fail_interrupted_runs, run_finder
from app.services.findings import queue_run as queue_findings
from app.services.heldout_gate import METHOD, decide, sample_ids
from app.services.queue_order import apply_order
from app.services.refresh import refresh_step
from app.services.suggestions import prune
from app.settings import Settings
from parser.adapt import choose_weighting, describe, parse_weighting
from parser.batch import parse_family_many, parse_many, watch_parent
from parser.chart import ParseResult
from parser.errors import ParserError
from parser.grammar import Grammar, Weighting, train_grammar
from parser.interval import f1_interval
from parser.scoring import score_corpus, score_pair
from parser.trees import drop_empty_elements, read_tree, words

log = logging.getLogger(__name__)
#: This machine's name, recorded as the owner of the jobs its processes claim.
HOST = owners.HOST
HEARTBEAT_SECONDS = owners.HEARTBEAT_SECONDS
STALE_AFTER = owners.STALE_AFTER

ROOT_LABEL = "ROOT"
KICK_FLAG = "treewright_training_kick"
#: Seconds between two progress writes to the database (a job writes far less often than this
#: in its slow phases; the cap keeps the fast ones from hammering the row).
PROGRESS_EVERY = 0.5
#: Sentences whose entropy the queue order uses: the ones still to be annotated.
RANKED_STATES = (SENT_QUEUED, SENT_IN_PROGRESS)

# --------------------------------------------------------------------------------------------
# queueing


def current_gold_count(db: Session, corpus_id: int) -> int:
    return (
        db.scalar(
            select(func.count(Gold.id))
            .join(Sentence, Sentence.id == Gold.sentence_id)
            .where(Sentence.corpus_id == corpus_id, Gold.retired_at.is_(None))
        )
        or 0
    )


def latest_version(db: Session, corpus_id: int) -> GrammarVersion | None:
    return db.scalar(
        select(GrammarVersion)
        .where(GrammarVersion.corpus_id == corpus_id)
        .order_by(GrammarVersion.number.desc())
        .limit(1)
    )


def open_job(db: Session, corpus_id: int) -> GrammarVersion | None:
    """The corpus's queued or running job, if any."""
    return db.scalar(
        select(GrammarVersion)
        .where(
            GrammarVersion.corpus_id == corpus_id,
            GrammarVersion.status.in_((GV_QUEUED, GV_TRAINING)),
        )
        .order_by(GrammarVersion.number)
        .limit(1)
    )


def new_gold_since_last(db: Session, corpus: Corpus) -> int:
    last = latest_version(db, corpus.id)
    return current_gold_count(db, corpus.id) - (last.gold_count_at_start if last else 0)


def _queue(db: Session, corpus: Corpus, reason: str, user_id: int | None) -> GrammarVersion | None:
    """Insert the next queued version (in a savepoint) or return None when another
    transaction took the number first."""
    last = latest_version(db, corpus.id)
    version = GrammarVersion(
        corpus_id=corpus.id,
        number=(last.number + 1) if last else 1,
        status=GV_QUEUED,
        progress=0.0,
        message="waiting for the trainer",
        options={"reason": reason, "requested_by": user_id},
        gold_count_at_start=current_gold_count(db, corpus.id),
    )
    try:
        with db.begin_nested():
            db.add(version)
            db.flush()
    except IntegrityError:
        return None
    db.add(
        Event(
            user_id=user_id,
            kind="grammar.queued",
            corpus_id=corpus.id,
            detail={"version": version.number, "reason": reason},
        )
    )
    db.info[KICK_FLAG] = True
    return version


def queue_if_due(db: Session, corpus: Corpus) -> GrammarVersion | None:
    """Queue the next version when :func:`retrain_interval` new gold trees have arrived. Does
    not commit; the job starts once the caller's transaction commits."""
    every = retrain_interval(corpus.options, current_gold_count(db, corpus.id))
    if every <= 0 or open_job(db, corpus.id) is not None:
        return None
    if new_gold_since_last(db, corpus) < every:
        return None
    return _queue(db, corpus, f"{every} new gold trees", None)


def request_training(
    db: Session, corpus_id: int, *, reason: str, user_id: int | None = None
) -> GrammarVersion:
    """Queue a version of the corpus now, or return the one already queued or training.
    Commits."""
    corpus = db.get(Corpus, corpus_id)
    if corpus is None:
        raise NotFound(f"no corpus with id {corpus_id}")
    for _ in range(3):
        existing = open_job(db, corpus_id)
        if existing is not None:
            return existing
        version = _queue(db, corpus, reason, user_id)
        if version is not None:
            db.commit()
            return version
    raise NotFound(f"could not queue a grammar for corpus {corpus_id}")  # pragma: no cover


# --------------------------------------------------------------------------------------------
# one job


def rooted(tree: Tree) -> Tree:
    """``tree`` with ROOT as its root label (see step 1 of the module docstring)."""
    if tree.label() == ROOT_LABEL:
        return tree
    if tree.label() in ("", "TOP"):
        return Tree(ROOT_LABEL, list(tree))
    return Tree(ROOT_LABEL, [tree])


def grammar_bytes(grammar: Grammar) -> bytes:
    """The grammar's saved form (Grammar.save's .npz file) as bytes for the database."""
    fd, path = tempfile.mkstemp(suffix=".npz")
    os.close(fd)
    try:
        grammar.save(path)
        with open(path, "rb") as fh:
            return fh.read()
    finally:
        os.unlink(path)


@dataclass(frozen=True)
class GoldTree:
    sentence_id: int
    tree: Tree


def load_gold(db: Session, corpus_id: int) -> list[GoldTree]:
    """Current gold of the corpus in sentence-id order, empty elements removed, ROOT-rooted."""
    rows = db.execute(
        select(Gold.sentence_id, Gold.tree, Gold.id)
        .join(Sentence, Sentence.id == Gold.sentence_id)
        .where(Sentence.corpus_id == corpus_id, Gold.retired_at.is_(None))
        .order_by(Gold.sentence_id, Gold.id)
    ).all()
    latest: dict[int, str] = {}
    for sid, text, _ in rows:
        latest[sid] = text  # the newest current row wins (there should be one)
    out = []
    for sid, text in latest.items():
        try:
            tree = drop_empty_elements(read_tree(text))
        except ParserError as err:
            # stored before the reader's depth limit (parser.trees.MAX_DEPTH): left out of
            # training so one such tree cannot fail every retraining of the corpus
            log.warning("gold of sentence %s left out of training: %s", sid, err)
            continue
        if tree is not None and words(tree):
            out.append(GoldTree(sid, rooted(tree)))
    return out


def split_heldout(gold: list[GoldTree], every: int) -> tuple[list[GoldTree], list[GoldTree]]:
    """(training slice, held-out slice): held out are sentences with ``id % every == 0``."""
    if every < 2:
        return list(gold), []
    train = [g for g in gold if g.sentence_id % every]
    held = [g for g in gold if not g.sentence_id % every]
    if not train:  # too little gold to hold any out
        return list(gold), []
    return train, held


class _Progress:
    """Writes progress to the version row, at most every PROGRESS_EVERY seconds."""

    def __init__(self, factory: sessionmaker[Session], version_id: int) -> None:
        self.factory = factory
        self.version_id = version_id
        self.last = 0.0

    def __call__(self, progress: float, message: str, force: bool = False) -> None:
        now = time.monotonic()
        if not force and now - self.last < PROGRESS_EVERY:
            return
        self.last = now
        with self.factory() as db:
            db.execute(
                update(GrammarVersion)
                .where(GrammarVersion.id == self.version_id)
                .values(progress=round(min(max(progress, 0.0), 1.0), 4), message=message)
            )
            db.commit()

    def phase(self, lo: float, hi: float, what: str) -> Callable[[int, int], None]:
        def report(done: int, total: int) -> None:
            self(lo + (hi - lo) * done / max(total, 1), f"{what} ({done} of {total})")

        return report


def _owned_here(message: str) -> dict[str, Any]:
    """The values that make this process the owner of a job that starts now."""
    return {"progress": 0.0, "message": message, **owners.owned_here()}


def claim(factory: sessionmaker[Session], version_id: int | None = None) -> int | None:
    """Take the oldest queued job (or the given one) for this worker; None if none left."""
    with factory() as db:
        query = select(GrammarVersion.id).where(GrammarVersion.status == GV_QUEUED)
        if version_id is not None:
            query = query.where(GrammarVersion.id == version_id)
        for vid in db.scalars(query.order_by(GrammarVersion.created_at, GrammarVersion.id)):
            moved = db.execute(
                update(GrammarVersion)
                .where(GrammarVersion.id == vid, GrammarVersion.status == GV_QUEUED)
                .values(status=GV_TRAINING, **_owned_here("starting"))
                .execution_options(synchronize_session=False)
            )
            db.commit()
            if cast(CursorResult[Any], moved).rowcount == 1:
                return vid
        return None


def _owner_seen(version: GrammarVersion) -> tuple[Any, ...]:
    """The conditions that the row still has the owner and heartbeat read in ``version``."""
    return owners.owner_seen(GrammarVersion, version, GV_TRAINING)


def take(factory: sessionmaker[Session], version_id: int) -> bool:
    """Make this process the owner of a job, as a queued job's runner does: from ``queued``
    (:func:`claim`), or from ``training`` when the owner is gone (:func:`owner_gone`: a worker
    killed mid-job). The take-over is a compare-and-set on the owner and heartbeat that were
    read, so of two processes that find the same abandoned job only one runs it again. False
    when the job is finished or a live process trains it: there is nothing to do."""
    if claim(factory, version_id) is not None:
        return True
    with factory() as db:
        version = db.get(GrammarVersion, version_id)
        if version is None or version.status != GV_TRAINING or not owner_gone(version, utcnow()):
            return False
        moved = db.execute(
            update(GrammarVersion)
            .where(*_owner_seen(version))
            .values(**_owned_here("started again: the process that trained it stopped"))
            .execution_options(synchronize_session=False)
        )
        db.commit()
        return cast(CursorResult[Any], moved).rowcount == 1


class Heartbeat(owners.Heartbeat):
    """While a job runs, a thread of its process writes ``heartbeat_at`` every
    HEARTBEAT_SECONDS, so that other processes can tell a live job from an abandoned one."""

    def __init__(
        self, factory: sessionmaker[Session], version_id: int, every: float = HEARTBEAT_SECONDS
    ) -> None:
        super().__init__(factory, GrammarVersion, version_id, GV_TRAINING, every)


def run_version(factory: sessionmaker[Session], version_id: int) -> None:
    """Run one claimed job (status ``training``) to its end; failures land in the row."""
    progress = _Progress(factory, version_id)
    try:
        with Heartbeat(factory, version_id):
            _run(factory, version_id, progress)
    except Exception as exc:  # noqa: BLE001 - every failure must reach the row, not vanish
        log.exception("training grammar version %s failed", version_id)
        with factory() as db:
            db.execute(
                update(GrammarVersion)
                .where(GrammarVersion.id == version_id)
                .values(status=GV_FAILED, message=f"failed: {exc}"[:2000], finished_at=utcnow())
            )
            db.commit()


def _run(factory: sessionmaker[Session], version_id: int, progress: _Progress) -> None:
    t0 = time.perf_counter()
    with factory() as db:
        version = db.get(GrammarVersion, version_id)
        if version is None:
            return
        corpus = db.get(Corpus, version.corpus_id)
        assert corpus is not None
        corpus_id = corpus.id
        every = corpus.options.heldout_every
        max_drop = corpus.options.max_f1_drop
        sample_limit = corpus.options.heldout_sample
        weight_setting = corpus.options.reference_weight
        refine_cycles = corpus.options.refine_cycles
        refine_min_gold = corpus.options.refine_min_gold
        gold = load_gold(db, corpus_id)
        refs = load_reference(db, corpus_id)
        version.gold_count_at_start = current_gold_count(db, corpus_id)
        db.commit()
    reference = [t for _, trees in refs for t in trees]
    progress(0.02, f"read {len(gold)} gold trees and {len(reference)} reference trees", force=True)
    if not gold and not reference:
        raise ValueError("the corpus has no gold trees and no reference trees to train on")
    train, held_all = split_heldout(gold, every)
    # a bounded random sample of the held-out gold is parsed (app.services.heldout_gate)
    sampled = sample_ids(corpus_id, [g.sentence_id for g in held_all], sample_limit)
    held = [g for g in held_all if g.sentence_id in sampled]
    t_load = time.perf_counter()

    heldout_f1: float | None = None
    heldout_detail: dict[str, Any] = {}
    adaptation: dict[str, Any] = {}
    # the reference-only start on today's held-out gold (the learning curve's baseline), parsed
    # in the same batch as the grammars scored below
    baseline = [train_grammar([], reference=reference)] if reference and held else []
    baseline_f1: list[float] = []

    def score(grammars: Sequence[Grammar]) -> list[list[tuple[int, int, int]]]:
        """Per grammar, its per-sentence counts on the held-out sample."""
        extra = [] if baseline_f1 else baseline
        details = _score_heldout_family([*grammars, *extra], held, progress)
        baseline_f1.extend(f for f, _ in details[len(grammars) :])
        scored.extend(details[: len(grammars)])
        return [
            [(c[0], c[1], c[2]) for c in d["per_sentence"].values()]
            for _, d in details[: len(grammars)]
        ]

    scored: list[tuple[float, dict[str, Any]]] = []
    if reference and weight_setting == AUTO_WEIGHT:
        choice = choose_weighting(
            [g.tree for g in train], [g.tree for g in held], reference, score=score
        )
        weighting = choice.weighting
        adaptation = {"setting": weight_setting, **choice.to_dict()}
        if choice.scores:
            best = [w for w, _ in choice.scores].index(weighting)
            heldout_f1, heldout_detail = scored[best]
    else:
        weighting = (
            parse_weighting(weight_setting)
            if reference and weight_setting != AUTO_WEIGHT
            else Weighting()
        )
        adaptation = {
            "setting": weight_setting,
            "weighting": describe(weighting),
            "reason": "set on the corpus" if reference else "no reference trees",
        }
    if held and heldout_f1 is None:
        g_slice = train_grammar(
            [g.tree for g in train],
            reference=reference,
            weighting=weighting,
            progress=progress.phase(0.02, 0.2, "training on the slice"),
        )
        score([g_slice])
        heldout_f1, heldout_detail = scored[-1]
    if baseline_f1:
        adaptation["reference_only_f1"] = round(baseline_f1[0], 5)
    cycles, refinement, refined_detail = refinement_choice.choose(
        [g.tree for g in train],
        len(gold),
        len(held),
        reference,
        weighting,
        heldout_f1,
        refine_cycles,
        refine_min_gold,
        score=lambda g: _score_heldout(g, held, progress),
        progress=lambda message: progress(0.85, message),
    )
    if refined_detail is not None:
        heldout_f1 = refined_detail.pop("f1")
        heldout_detail = refined_detail
    t_eval = time.perf_counter()
    if cycles:
        grammar = refinement_choice.train_final(
            [g.tree for g in gold], reference, cycles, lambda message: progress(0.9, message)
        )
    else:
        grammar = train_grammar(
            [g.tree for g in gold],
            reference=reference,
            weighting=weighting,
            progress=progress.phase(0.85, 0.95, "training on all gold"),
        )
    data = grammar_bytes(grammar)
    t_final = time.perf_counter()

    with factory() as db:
        version = db.get(GrammarVersion, version_id)
        corpus = db.get(Corpus, corpus_id)
        assert version is not None and corpus is not None
        active = (
            db.get(GrammarVersion, corpus.active_grammar_id) if corpus.active_grammar_id else None
        )
        decision = (
            decide(
                heldout_f1,
                heldout_detail,
                active.heldout_f1,
                (active.options or {}).get("heldout"),
                max_drop,
            )
            if active is not None and active.id != version.id
            else None
        )
        rejected = decision is not None and decision.rejected
        version.data = data
        version.training_size = len(gold)
        version.heldout_size = len(held_all)
        version.heldout_f1 = heldout_f1
        version.train_seconds = round(t_final - t0, 3)
        version.options = {
            **(version.options or {}),
            "heldout_every": every,
            "max_f1_drop": max_drop,
            "markovization": {
                "horizontal": grammar.meta.get("horizontal"),
                "vertical": grammar.meta.get("vertical"),
                "min_context": grammar.meta.get("min_context"),
            },
            "slice_size": len(train),
            "heldout": heldout_detail,
            "heldout_sampled": len(held),
            "gate": decision.detail if decision is not None else None,
            "reference": [{"id": rid, "trees": len(trees)} for rid, trees in refs],
            "reference_trees": len(reference),
            "adaptation": adaptation,
            "refinement": refinement,
            "worker_pid": os.getpid(),
            "timing": {
                "load": round(t_load - t0, 3),
                "slice_and_heldout": round(t_eval - t_load, 3),
                "final": round(t_final - t_eval, 3),
            },
        }
        version.finished_at = utcnow()
        # an active version still refreshes suggestions (step 6): 1.0 once that is done
        version.progress = 1.0 if rejected else 0.97
        f1_text = (
            "no held-out gold"
            if heldout_f1 is None
            else f"held-out F1 {heldout_f1:.4f} (95% interval "
            f"{heldout_detail.get('ci_low', heldout_f1):.4f} to "
            f"{heldout_detail.get('ci_high', heldout_f1):.4f}, {len(held)} of "
            f"{len(held_all)} held-out sentences)"
        )
        if rejected:
            assert active is not None and active.heldout_f1 is not None
            version.status = GV_REJECTED
            assert decision is not None
            version.message = (
                f"rejected: {f1_text} against the active version {active.number} "
                f"({active.heldout_f1:.4f}): {decision.reason(max_drop)}"
            )
        else:
            version.status = GV_READY
            version.message = f"active; {f1_text}; refreshing suggestions"
            corpus.active_grammar_id = version.id
        # the finder looks over the gold again with each new grammar (drained after the jobs)
        queue_findings(db, corpus_id, reason=f"after grammar version {version.number}")
        db.add(
            Event(
                kind="grammar.trained",
                corpus_id=corpus_id,
                detail={
                    "version": version.number,
                    "status": version.status,
                    "heldout_f1": heldout_f1,
                    "training_size": len(gold),
                },
            )
        )
        db.commit()
        if rejected:
            return
        try:
            refreshed = _refresh(db, corpus, version)
        except Exception as exc:  # noqa: BLE001 - the grammar is good; only the cache lags
            log.exception("refreshing suggestions under grammar version %s failed", version_id)
            db.rollback()
            refreshed = f"refreshing the suggestions failed: {exc}"[:1000]
        if corpus.options.queue_order == QueueOrder.INFORMATIVE:
            try:
                ranked = rank_open_sentences(db, corpus.id, version.id, grammar)
                refreshed += f"; {ranked} open sentences ranked by the grammar's uncertainty"
            except Exception as exc:  # noqa: BLE001 - the queue falls back to document order
                log.exception("ranking the queue under grammar version %s failed", version_id)
                db.rollback()
                refreshed += f"; ranking the queue failed: {exc}"[:500]
        db.execute(
            update(GrammarVersion)
            .where(GrammarVersion.id == version_id)
            .values(message=f"active; {f1_text}; {refreshed}", progress=1.0)
        )
        db.commit()


def _score_heldout(
    grammar: Grammar, held: list[GoldTree], progress: _Progress
) -> tuple[float, dict[str, Any]]:
    """PARSEVAL F1 of ``grammar`` on the held-out sample, parsed in parallel (up to the parse
    admission's bound, :func:`app.services.admission.parallel_parses`), with its bootstrap
    interval and the per-sentence counts the next version's gate compares against
    (:mod:`app.services.heldout_gate`)."""
    report = progress.phase(0.2, 0.85, "parsing the held-out gold")
    workers = parallel_parses()
    # Scored as annotators see it: the consensus tree a new annotation starts from.
    results = parse_many(
        grammar,
        [words(g.tree) for g in held],
        posteriors=True,
        processes=workers,
        chunk=max(8, math.ceil(len(held) / (2 * workers))),
        threads=1,
        progress=report,
    )
    return _heldout_detail(held, results)


def _score_heldout_family(
    grammars: Sequence[Grammar], held: list[GoldTree], progress: _Progress
) -> list[tuple[float, dict[str, Any]]]:
    """:func:`_score_heldout` of each grammar, all parsed in one batch of workers, the later
    grammars pruned by the first one's posteriors (:func:`parser.batch.parse_family_many`)."""
    report = progress.phase(0.2, 0.85, f"parsing the held-out gold with {len(grammars)} grammars")
    workers = parallel_parses()
    per_sentence = parse_family_many(
        grammars,
        [words(g.tree) for g in held],
        processes=workers,
        chunk=max(4, math.ceil(len(held) / (2 * workers))),
        threads=1,
        progress=report,
    )
    return [_heldout_detail(held, [rs[i] for rs in per_sentence]) for i in range(len(grammars))]


def _heldout_detail(
    held: list[GoldTree], results: Sequence[ParseResult]
) -> tuple[float, dict[str, Any]]:
    pairs = [
        (g.tree, rooted(r.consensus or r.trees[0])) for g, r in zip(held, results, strict=True)
    ]
    fallbacks = sum(bool(r.fallback) for r in results)
    score = score_corpus(pairs)
    counts = [score_pair(gold, test).labelled for gold, test in pairs]
    interval = f1_interval([(c.matched, c.gold, c.test) for c in counts])
    return score.f1, {
        "precision": score.precision,
        "recall": score.recall,
        "exact": score.exact,
        "sentences": score.sentences,
        "fallbacks": fallbacks,
        "ci_low": round(interval.low, 6),
        "ci_high": round(interval.high, 6),
        "se": round(interval.se, 6),
        "ci_method": METHOD,
        "per_sentence": {
            str(g.sentence_id): [c.matched, c.gold, c.test]
            for g, c in zip(held, counts, strict=True)
        },
    }


def _refresh(db: Session, corpus: Corpus, version: GrammarVersion) -> str:
    """Let go of what the older versions left (:func:`app.services.suggestions.prune`), then
    parse the sentences the annotators open next (:func:`app.services.refresh.refresh_step`,
    bounded; the rest are parsed when opened); a short summary for the row's message."""
    deleted, dropped = prune(db, corpus, corpus.options.keep_grammars)
    db.commit()
    report = refresh_step(db, corpus)
    return (
        f"{report.summary()}; {deleted} older suggestions and {dropped} older saved grammars let go"
    )


def load_reference(db: Session, corpus_id: int) -> list[tuple[int, list[Tree]]]:
    """(set id, trees) of every reference set the corpus trains on, ROOT-rooted."""
    rows = db.execute(
        select(ReferenceSet.id, ReferenceSet.trees)
        .where(ReferenceSet.corpus_id == corpus_id, ReferenceSet.in_use.is_(True))
        .order_by(ReferenceSet.id)
    ).all()
    return [
        (rid, [rooted(read_tree(line)) for line in text.splitlines() if line.strip()])
        for rid, text in rows
    ]


def rank_open_sentences(db: Session, corpus_id: int, version_id: int, grammar: Grammar) -> int:
    """Store the tree entropy per word (parser.chart.tree_entropy) of every open sentence of
    the corpus under ``grammar``, which orders the queue "most informative first". Commits in
    batches (a background job); returns how many sentences were ranked."""
    from parser.chart import tree_entropy

    rows = db.execute(
        select(Sentence.id, Sentence.tokens)
        .where(Sentence.corpus_id == corpus_id, Sentence.state.in_(RANKED_STATES))
        .order_by(Sentence.id)
    ).all()
    done = 0
    for start in range(0, len(rows), 50):
        for sid, tokens in rows[start : start + 50]:
            entropy = tree_entropy(grammar, tokens) if tokens else math.nan
            per_word = None if math.isnan(entropy) else round(entropy / len(tokens), 6)
            db.execute(
                update(Sentence)
                .where(Sentence.id == sid)
                .values(entropy_per_word=per_word, entropy_grammar_id=version_id)
            )
            done += 1
        db.commit()
    apply_order(db, corpus_id)
    db.commit()
    return done


def drain(factory: sessionmaker[Session]) -> int:
    """Run queued jobs, then queued findings runs, until none is left; how many ran."""
    ran = 0
    while True:
        while (vid := claim(factory)) is not None:
            run_version(factory, vid)
            ran += 1
        if (rid := claim_findings(factory)) is None:
            return ran
        run_finder(factory, rid)
        ran += 1


def _finished(
    factory: sessionmaker[Session], version_id: int, timeout: float = 1800.0
) -> GrammarVersion:
    """Wait for another trainer's run of a version (trained, and its suggestions refreshed
    when it became active) and return the finished row; Conflict after ``timeout`` s."""
    deadline = time.monotonic() + timeout
    while True:
        with factory() as db:
            row = db.get(GrammarVersion, version_id)
            assert row is not None
            if row.status not in (GV_QUEUED, GV_TRAINING) and (
                row.status != GV_READY or row.progress >= 1.0
            ):
                db.expunge(row)
                return row
        if time.monotonic() > deadline:
            raise Conflict(f"grammar version {version_id} is still being trained elsewhere")
        time.sleep(0.2)


def run_training(
    factory: sessionmaker[Session], corpus_id: int, *, reason: str, user_id: int | None = None
) -> GrammarVersion:
    """Train the corpus's next version now, in this thread, and return its finished row.

    Uses the queued job of the corpus if there is one; raises Conflict if one is running.
    """
    with factory() as db:
        version = request_training(db, corpus_id, reason=reason, user_id=user_id)
        version_id = version.id
        if version.status == GV_TRAINING:
            raise Conflict(
                f"grammar version {version.number} of corpus {corpus_id} is training already"
            )
    if claim(factory, version_id) is None:
        # the background runner claimed the job between queueing and here: it trains it, so
        # wait for that run instead of training the same version twice
        return _finished(factory, version_id)
    run_version(factory, version_id)
    with factory() as db:
        row = db.get(GrammarVersion, version_id)
        assert row is not None
        db.expunge(row)
        return row


def owner_gone(version: GrammarVersion, now: datetime) -> bool:
    """Whether the process that claimed a ``training`` job no longer runs it: its heartbeat is
    older than STALE_AFTER seconds, or it ran on this host and its process has ended. A job
    claimed before owners were recorded has none and counts as abandoned."""
    return owners.owner_gone(version, now)


def fail_interrupted(factory: sessionmaker[Session], *, requeue: bool = False) -> int:
    """Mark the jobs in ``training`` whose owner is gone (see :func:`owner_gone`) as failed;
    a job another live process trains is left alone. Findings runs left ``running`` are
    failed too (those whose owner is gone). How many jobs were failed. Commits.

    ``requeue`` (the worker queue, app.jobs): put such jobs back to ``queued`` instead, to be
    run again from the start under the same version row and number; findings runs are left
    to the queue's own retry there, which takes a run over only when its owner is gone
    (:func:`app.services.findings.take_run`)."""
    failed = 0
    with factory() as db:
        now = utcnow()
        for version in db.scalars(
            select(GrammarVersion).where(GrammarVersion.status == GV_TRAINING)
        ).all():
            if not owner_gone(version, now):
                continue
            values: dict[str, Any] = (
                {
                    "status": GV_QUEUED,
                    "progress": 0.0,
                    "message": "queued again: the process that trained it stopped",
                    "owner_host": None,
                    "owner_pid": None,
                    "heartbeat_at": None,
                }
                if requeue
                else {
                    "status": GV_FAILED,
                    "finished_at": now,
                    "message": "interrupted: the process that trained it stopped",
                }
            )
            # compare-and-set: the owner may have finished or beaten meanwhile
            moved = db.execute(
                update(GrammarVersion)
                .where(*_owner_seen(version))
                .values(**values)
                .execution_options(synchronize_session=False)
            )
            failed += int(cast(CursorResult[Any], moved).rowcount or 0)
        db.commit()
    if not requeue:
        fail_interrupted_runs(factory)
    return failed


# --------------------------------------------------------------------------------------------
# the runner


_WORKER_FACTORIES: dict[str, sessionmaker[Session]] = {}


def _drain_in_worker(url: str) -> int:
    """Entry point in the worker process: its own engine, then drain the queue."""
    factory = _WORKER_FACTORIES.get(url)
    if factory is None:
        parsed = make_url(url)
        # make_engine creates the data folder of a SQLite URL; point it at the file's own one
        folder = (
            Path(parsed.database).parent
            if parsed.get_backend_name() == "sqlite" and parsed.database
            else Path(tempfile.gettempdir())
        )
        settings = Settings(database_url=url, data_dir=folder)
        factory = make_sessionmaker(make_engine(settings))
        _WORKER_FACTORIES[url] = factory
        # the same parse bounds as the web process (background parses: parallel_parses)
        configure_admission(settings)
    return drain(factory)


class Runner(Protocol):
    """What runs the queued jobs of one database: this module's :class:`TrainingRunner`, or
    app.jobs.QueueRunner (``job_runner = "workers"``: jobs go to ``treewright worker``
    processes through the database)."""

    factory: sessionmaker[Session]
    last_error: BaseException | None

    def recover(self) -> None: ...

    def kick(self) -> None: ...

    def wait_idle(self, timeout: float = 600.0) -> None: ...

    def shutdown(self, wait: bool = True) -> None: ...


class TrainingRunner:
    """One worker (process or thread) that drains the job queue whenever it is kicked."""

    def __init__(self, factory: sessionmaker[Session], *, url: str, in_process: bool) -> None:
        self.factory = factory
        self.url = url
        self.in_process = in_process
        self._lock = threading.Lock()
        self._executor: Executor | None = None
        self._pending: Future[int] | None = None
        self.last_error: BaseException | None = None
        self._closing = False

    def _ensure_executor(self) -> Executor:
        if self._executor is None:
            if self.in_process:
                self._executor = ThreadPoolExecutor(
                    max_workers=1, thread_name_prefix="treewright-train"
                )
            else:
                self._executor = ProcessPoolExecutor(
                    max_workers=1,
                    mp_context=multiprocessing.get_context("spawn"),
                    initializer=watch_parent,
                    initargs=(os.getpid(),),
                )
        return self._executor

    def recover(self) -> None:
        """On first use: fail the jobs that a stopped process left (:func:`fail_interrupted`)."""
        fail_interrupted(self.factory)

    def kick(self) -> None:
        """Make sure a drain runs after this call (cheap; never blocks on training)."""
        with self._lock:
            pending = self._pending
            if pending is not None and not pending.done() and not pending.running():
                return  # a drain that has not started yet will see the new job
            executor = self._ensure_executor()
            try:
                if self.in_process:
                    fut = executor.submit(drain, self.factory)
                else:
                    fut = executor.submit(_drain_in_worker, self.url)
            except RuntimeError:  # a broken or shut-down pool: start a fresh one
                self._executor = None
                executor = self._ensure_executor()
                fut = (
                    executor.submit(drain, self.factory)
                    if self.in_process
                    else executor.submit(_drain_in_worker, self.url)
                )
            self._pending = fut
            fut.add_done_callback(self._finished)

    def _finished(self, fut: Future[int]) -> None:
        exc = fut.exception()
        if exc is None:
            return
        self.last_error = exc
        if not self._closing:
            log.error("the training worker failed: %r", exc)
        with self._lock:
            self._executor = None  # e.g. BrokenProcessPool: the next kick starts a new one
        fail_interrupted(self.factory)

    def wait_idle(self, timeout: float = 600.0) -> None:
        """Block until no drain is pending or running (for tests, scripts and shutdown)."""
        deadline = time.monotonic() + timeout
        while True:
            with self._lock:
                pending = self._pending
            if pending is None or pending.done():
                return
            remaining = deadline - time.monotonic()
            if remaining <= 0:
                raise TimeoutError("the training worker is still busy")
            try:
                pending.result(timeout=remaining)
            except Exception:  # noqa: BLE001 - reported by _finished; here we only wait
                return

    def shutdown(self, wait: bool = True) -> None:
        """Stop the worker. ``wait=False`` (service shutdown) also ends a training process at
        once instead of letting the interpreter wait for it; its row stays ``training`` and
        the next start marks it failed (see :func:`fail_interrupted`)."""
        with self._lock:
            executor, self._executor = self._executor, None
            self._closing = True
        if executor is None:
            return
        # shutdown() forgets the worker processes, so take them first
        processes = list((getattr(executor, "_processes", None) or {}).values())
        executor.shutdown(wait=wait, cancel_futures=not wait)
        if not wait:
            for proc in processes:
                proc.terminate()


_RUNNERS: weakref.WeakKeyDictionary[Engine, Runner] = weakref.WeakKeyDictionary()
_RUNNERS_LOCK = threading.Lock()


def get_runner(target: Any, *, in_process: bool | None = None) -> Runner:
    """The runner of an app (pass ``app.state``) or of a sessionmaker, created on first use;
    kicked when queued jobs wait (one COUNT query).

    With app state the setting ``job_runner`` decides between this process's runner and the
    worker queue (app.jobs), and ``training_in_process`` between thread and process; with a
    bare sessionmaker ``in_process`` does (default: a process).
    """
    factory: sessionmaker[Session] = getattr(target, "sessionmaker", target)
    engine = factory.kw["bind"]
    settings = getattr(target, "settings", None)
    if in_process is None:
        in_process = bool(settings.training_in_process) if settings is not None else False
    with _RUNNERS_LOCK:
        runner = _RUNNERS.get(engine)
        created = runner is None
        if runner is None:
            url = engine.url.render_as_string(hide_password=False)
            if settings is not None and settings.job_runner == "workers":
                from app.jobs import QueueRunner  # PostgreSQL and procrastinate only

                runner = QueueRunner(factory, settings)
            else:
                runner = TrainingRunner(factory, url=url, in_process=in_process)
            _RUNNERS[engine] = runner
            if settings is not None:
                target.training_runner = runner
    if created:
        runner.recover()
    # jobs queued by another process (an import from the CLI, a test) start here too
    with factory() as db:
        waiting = db.scalar(
            select(func.count(GrammarVersion.id)).where(GrammarVersion.status == GV_QUEUED)
        )
    if waiting:
        runner.kick()
    return runner


def defer_refresh(state: Any, corpus_id: int, user_id: int, k: int) -> bool:
    """With ``job_runner = "workers"``: put the look-ahead refresh after a hand-in on the
    worker queue (app.jobs) and return True; otherwise (this server runs its own jobs, or
    the queue could not be reached) False, and the caller refreshes in this process."""
    if state.settings.job_runner != "workers":
        return False
    runner = get_runner(state)
    defer = getattr(runner, "defer_refresh", None)
    return bool(defer is not None and defer(corpus_id, user_id, k))


def schedule_training(
    target: Any, corpus_id: int, reason: str, user_id: int | None = None
) -> GrammarVersion:
    """Queue a version of the corpus (or return its open job) and start the runner.

    ``target`` is ``app.state`` or a sessionmaker (see :func:`get_runner`).
    """
    runner = get_runner(target)
    with runner.factory() as db:
        version = request_training(db, corpus_id, reason=reason, user_id=user_id)
        db.expunge(version)
    runner.kick()
    return version


@event.listens_for(Session, "after_commit")
def _kick_after_commit(session: Session) -> None:
    if not session.info.pop(KICK_FLAG, False):
        return
    bind = session.get_bind()
    runner = _RUNNERS.get(bind) if isinstance(bind, Engine) else None
    if runner is not None:
        runner.kick()


@event.listens_for(Session, "after_rollback")
def _forget_kick(session: Session) -> None:
    session.info.pop(KICK_FLAG, None)


# --------------------------------------------------------------------------------------------
# what the Grammars page shows


def versions(db: Session, corpus_id: int) -> list[GrammarVersion]:
    """Every grammar version of the corpus, newest first (the saved grammar is not loaded)."""
    return list(
        db.scalars(
            select(GrammarVersion)
            .where(GrammarVersion.corpus_id == corpus_id)
            .order_by(GrammarVersion.number.desc())
        )
    )


def version_number(db: Session, version_id: int | None) -> int | None:
    """The number of a grammar version within its corpus (None for no or an unknown id)."""
    if version_id is None:
        return None
    version = db.get(GrammarVersion, version_id)
    return version.number if version is not None else None


def get_version(db: Session, version_id: int) -> GrammarVersion:
    version = db.get(GrammarVersion, version_id)
    if version is None:
        raise NotFound(f"no grammar version with id {version_id}")
    return version


def weight_text(version: GrammarVersion) -> str:
    """How the version weighed its gold against reference trees, in words for the pages."""
    options = version.options or {}
    adaptation = options.get("adaptation") or {}
    if not options.get("reference_trees"):
        return "gold only"
    text = f"in-domain weight {adaptation.get('weighting', '?')}"
    if adaptation.get("setting") == AUTO_WEIGHT:
        text += " (auto: " + str(adaptation.get("reason", "")) + ")"
    return text


def reference_only_f1(version: GrammarVersion) -> float | None:
    """The held-out F1 of the reference trees alone, scored with the version (or None)."""
    value = ((version.options or {}).get("adaptation") or {}).get("reference_only_f1")
    return float(value) if value is not None else None


def scored_versions(db: Session, corpus_id: int) -> list[GrammarVersion]:
    """The corpus's versions with a held-out F1 (ready or rejected), oldest first."""
    return [
        v
        for v in db.scalars(
            select(GrammarVersion)
            .where(
                GrammarVersion.corpus_id == corpus_id,
                GrammarVersion.status.in_((GV_READY, GV_REJECTED)),
            )
            .order_by(GrammarVersion.number)
        )
        if v.heldout_f1 is not None
    ]
