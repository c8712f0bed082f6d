"""The inconsistency finder in the service: runs in the background, stored findings, listing.

What it does
    * :func:`queue_run` adds a queued :class:`FindingRun` for a corpus (or returns the one
      already queued). Runs are queued on request (the Findings page, the API) and after each
      retraining (``app.services.training`` calls :func:`queue_run` when a version finishes).
      The training runner's worker drains them after the grammar jobs
      (:func:`drain_runs`), so a run never occupies a request or the web process.
    * :func:`run_finder` reads the corpus's current gold trees (and, when the run asks, the
      newest tree of every submitted annotation of sentences not yet gold), runs
      :func:`parser.variation.find_inconsistencies` and stores every finding with its rank,
      its occurrences and who settled each (the adjudicator, "import" or the annotators who
      agreed; for an annotation, its annotator). One transaction: a run's findings appear
      whole or not at all.
    * :func:`finding_page` lists the newest finished run's findings by rank, filtered by kind
      and by state: ``open`` (no verdict), ``fine_as_is`` (an adjudicator kept it as it is;
      not shown among the open ones again, in this run or a later one, since verdicts are
      remembered by the finding's key) or ``reopened`` (its sentences were sent back to
      review). Verdicts are made in ``app.services.finding_verdicts``.

Who sees it: the pages and API routes admit adjudicators and admins only (a finding names
other people's trees).
Cost: a run is the finder's cost (seconds on thousands of trees) plus one INSERT per finding;
a page reads one page of rows and the newest verdict of their keys.
"""

from __future__ import annotations

import hashlib
import logging
import os
import time
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import delete, select, update
from sqlalchemy.orm import Session, sessionmaker

from app.models import (
    ANN_SUBMITTED,
    RUN_DONE,
    RUN_FAILED,
    RUN_QUEUED,
    RUN_RUNNING,
    SENT_GOLD,
    VERDICTS,
    Annotation,
    Event,
    FindingRow,
    FindingRun,
    FindingVerdict,
    Gold,
    Revision,
    Sentence,
    User,
    utcnow,
)
from app.services import owners
from app.services.blind import unfinished_sentences
from app.services.errors import BadInput, NotFound
from app.services.paging import PageWindow
from parser.trees import drop_empty_elements, read_tree
from parser.variation import KINDS, FinderOptions, TreeSource, find_inconsistencies

log = logging.getLogger(__name__)

STATE_OPEN = "open"
FINDING_STATES = (STATE_OPEN, *VERDICTS)


def key_hash(key: str) -> str:
    return hashlib.sha256(key.encode("utf-8")).hexdigest()


# --------------------------------------------------------------------------------------------
# queueing and running


def queue_run(
    db: Session,
    corpus_id: int,
    *,
    reason: str,
    user_id: int | None = None,
    with_annotations: bool = False,
) -> FindingRun:
    """The corpus's queued run (asking for annotations too if this request does), or a new
    one. A step: flushes, does not commit."""
    run = db.scalar(
        select(FindingRun)
        .where(FindingRun.corpus_id == corpus_id, FindingRun.status == RUN_QUEUED)
        .limit(1)
    )
    if run is None:
        run = FindingRun(
            corpus_id=corpus_id,
            status=RUN_QUEUED,
            reason=reason,
            requested_by_id=user_id,
            with_annotations=with_annotations,
            message="waiting for the worker",
            created_at=utcnow(),
        )
        db.add(run)
        db.add(
            Event(
                user_id=user_id,
                kind="findings.queued",
                corpus_id=corpus_id,
                detail={"reason": reason, "with_annotations": with_annotations},
            )
        )
    elif with_annotations:
        run.with_annotations = True
    db.flush()
    return run


def claim_run(factory: sessionmaker[Session], only: int | None = None) -> int | None:
    """Take the oldest queued run, or the run ``only`` if it is queued (queued -> running);
    None when none waits."""
    with factory() as db:
        while True:
            query = select(FindingRun.id).where(FindingRun.status == RUN_QUEUED)
            if only is not None:
                query = query.where(FindingRun.id == only)
            run_id = db.scalar(query.order_by(FindingRun.id).limit(1))
            if run_id is None:
                return None
            taken = db.execute(
                update(FindingRun)
                .where(FindingRun.id == run_id, FindingRun.status == RUN_QUEUED)
                .values(status=RUN_RUNNING, message="finding", **owners.owned_here())
                .execution_options(synchronize_session=False)
            )
            db.commit()
            if getattr(taken, "rowcount", 0) == 1:
                return int(run_id)


def take_run(factory: sessionmaker[Session], run_id: int) -> bool:
    """Make this process the owner of a run, as a queued run's job does: from ``queued``
    (:func:`claim_run`), or from ``running`` when its owner is gone
    (:func:`app.services.owners.owner_gone`: a worker killed mid-run). The take-over is a
    compare-and-set on the owner and heartbeat read, so of two processes that find the same
    abandoned run only one runs it again. False when the run is finished or a live process
    runs it: a retry of a live-but-slow run does nothing."""
    if claim_run(factory, run_id) is not None:
        return True
    with factory() as db:
        run = db.get(FindingRun, run_id)
        if run is None or run.status != RUN_RUNNING or not owners.owner_gone(run, utcnow()):
            return False
        moved = db.execute(
            update(FindingRun)
            .where(*owners.owner_seen(FindingRun, run, RUN_RUNNING))
            .values(message="found again: the process that ran it stopped", **owners.owned_here())
            .execution_options(synchronize_session=False)
        )
        db.commit()
        return getattr(moved, "rowcount", 0) == 1


def run_now(
    db: Session,
    corpus_id: int,
    *,
    reason: str,
    with_annotations: bool = False,
    options: FinderOptions | None = None,
) -> FindingRun:
    """Run the finder on the corpus in this process, now (the command line), and return the
    finished (or failed) run. Commits."""
    run = FindingRun(
        corpus_id=corpus_id,
        status=RUN_RUNNING,
        reason=reason,
        with_annotations=with_annotations,
        message="finding",
        created_at=utcnow(),
        **owners.owned_here(),
    )
    db.add(run)
    db.commit()
    run_finder(sessionmaker(bind=db.get_bind()), run.id, options)
    db.refresh(run)
    return run


def fail_interrupted_runs(factory: sessionmaker[Session]) -> int:
    """Mark runs left ``running`` by a process that stopped (their owner is gone, see
    :func:`app.services.owners.owner_gone`) as failed; a run a live process runs is left
    alone. How many were failed. Commits."""
    failed = 0
    with factory() as db:
        now = utcnow()
        for run in db.scalars(select(FindingRun).where(FindingRun.status == RUN_RUNNING)).all():
            if not owners.owner_gone(run, now):
                continue
            result = db.execute(
                update(FindingRun)
                .where(*owners.owner_seen(FindingRun, run, RUN_RUNNING))
                .values(
                    status=RUN_FAILED,
                    finished_at=now,
                    message="interrupted: the service stopped while it ran",
                )
                .execution_options(synchronize_session=False)
            )
            failed += int(getattr(result, "rowcount", 0) or 0)
        db.commit()
        return failed


def drain_runs(factory: sessionmaker[Session]) -> int:
    """Run queued runs until none is left; how many ran."""
    ran = 0
    while (run_id := claim_run(factory)) is not None:
        run_finder(factory, run_id)
        ran += 1
    return ran


@dataclass(frozen=True)
class SourceInfo:
    """Who settled (gold) or made (annotation) a tree the finder read."""

    source: str  # "gold" | "annotation"
    by: str


def load_sources(
    db: Session, corpus_id: int, *, with_annotations: bool
) -> tuple[list[TreeSource], dict[str, SourceInfo]]:
    """The trees a run reads: keys ``g<gold id>`` and ``a<annotation id>``."""
    names = dict(db.execute(select(User.id, User.username)).all())
    sources: list[TreeSource] = []
    info: dict[str, SourceInfo] = {}
    rows = db.execute(
        select(Gold.id, Gold.sentence_id, Gold.tree, Gold.provenance, Gold.adjudicator_id)
        .join(Sentence, Sentence.id == Gold.sentence_id)
        .where(Sentence.corpus_id == corpus_id, Gold.retired_at.is_(None))
        .order_by(Gold.sentence_id, Gold.id)
    ).all()
    for gid, sid, text, provenance, adj in rows:
        tree = drop_empty_elements(read_tree(text))
        if tree is None:
            continue
        key = f"g{gid}"
        sources.append(TreeSource(key, sid, tree))
        by = names.get(adj, "") if adj else ""
        info[key] = SourceInfo("gold", by or provenance)
    if with_annotations:
        arows = db.execute(
            select(Annotation.id, Annotation.sentence_id, Annotation.user_id, Revision.tree)
            .join(Sentence, Sentence.id == Annotation.sentence_id)
            .join(
                Revision,
                (Revision.annotation_id == Annotation.id) & (Revision.number == Annotation.head),
            )
            .where(
                Sentence.corpus_id == corpus_id,
                Sentence.state != SENT_GOLD,
                Annotation.state == ANN_SUBMITTED,
            )
            .order_by(Annotation.sentence_id, Annotation.id)
        ).all()
        for aid, sid, uid, text in arows:
            tree = drop_empty_elements(read_tree(text))
            if tree is None:
                continue
            key = f"a{aid}"
            sources.append(TreeSource(key, sid, tree))
            info[key] = SourceInfo("annotation", names.get(uid, ""))
    return sources, info


def run_finder(
    factory: sessionmaker[Session], run_id: int, options: FinderOptions | None = None
) -> None:
    """Run one claimed run to its end, beating its heartbeat meanwhile; a failure lands in
    the row, not in the caller."""
    try:
        with owners.Heartbeat(factory, FindingRun, run_id, RUN_RUNNING):
            _run(factory, run_id, options)
    except Exception as exc:  # noqa: BLE001 - every failure must reach the row
        log.exception("findings run %s failed", run_id)
        with factory() as db:
            db.execute(
                update(FindingRun)
                .where(
                    FindingRun.id == run_id,
                    FindingRun.status == RUN_RUNNING,
                    FindingRun.owner_host == owners.HOST,
                    FindingRun.owner_pid == os.getpid(),
                )
                .values(status=RUN_FAILED, message=f"failed: {exc}"[:2000], finished_at=utcnow())
            )
            db.commit()


def _still_mine(run: FindingRun) -> bool:
    """Whether this process still owns the running ``run``."""
    return run.status == RUN_RUNNING and owners.owned_by_me(run)


def _run(factory: sessionmaker[Session], run_id: int, options: FinderOptions | None) -> None:
    t0 = time.perf_counter()
    with factory() as db:
        run = db.get(FindingRun, run_id)
        if run is None or not _still_mine(run):
            return
        sources, info = load_sources(db, run.corpus_id, with_annotations=run.with_annotations)
        found = find_inconsistencies(sources, options)
        for rank, f in enumerate(found, 1):
            occ = []
            for o in f.occurrences:
                who = info[str(o.key)]
                occ.append(
                    {
                        "key": o.key,
                        "sentence": o.sentence,
                        "start": o.start,
                        "end": o.end,
                        "analysis": o.analysis,
                        "source": who.source,
                        "by": who.by,
                    }
                )
            db.add(
                FindingRow(
                    run_id=run.id,
                    corpus_id=run.corpus_id,
                    kind=f.kind,
                    key=f.key,
                    key_hash=key_hash(f.key),
                    rank=rank,
                    score=f.score,
                    summary=f.summary,
                    occurrences=occ,
                    detail=f.detail,
                )
            )
        db.flush()
        # only the run's owner writes its findings: a process that took it over meanwhile (this
        # one was silent too long) writes its own; the row lock taken here orders the two
        db.refresh(run, with_for_update=True)
        if not _still_mine(run):
            db.rollback()
            log.warning("findings run %s was taken over by another process; not written", run_id)
            return
        # older runs' findings are superseded; their runs stay as a record
        db.execute(
            delete(FindingRow).where(
                FindingRow.corpus_id == run.corpus_id, FindingRow.run_id != run.id
            )
        )
        run.status = RUN_DONE
        run.trees = len(sources)
        run.seconds = round(time.perf_counter() - t0, 3)
        run.finished_at = utcnow()
        run.message = f"{len(found)} findings in {len(sources)} trees"
        db.add(
            Event(
                user_id=run.requested_by_id,
                kind="findings.done",
                corpus_id=run.corpus_id,
                detail={"run": run.id, "findings": len(found)},
            )
        )
        db.commit()


# --------------------------------------------------------------------------------------------
# reading


def latest_run(db: Session, corpus_id: int, *, finished: bool = True) -> FindingRun | None:
    where = [FindingRun.corpus_id == corpus_id]
    if finished:
        where.append(FindingRun.status == RUN_DONE)
    return db.scalar(select(FindingRun).where(*where).order_by(FindingRun.id.desc()).limit(1))


def pending_run(db: Session, corpus_id: int) -> FindingRun | None:
    """The corpus's queued or running run, if any."""
    return db.scalar(
        select(FindingRun)
        .where(FindingRun.corpus_id == corpus_id, FindingRun.status.in_((RUN_QUEUED, RUN_RUNNING)))
        .order_by(FindingRun.id)
        .limit(1)
    )


def verdicts_of(
    db: Session, corpus_id: int, hashes: Sequence[str] | None = None
) -> dict[str, FindingVerdict]:
    """The newest verdict per key hash (of the given hashes, or of every key)."""
    q = select(FindingVerdict).where(FindingVerdict.corpus_id == corpus_id)
    if hashes is not None:
        q = q.where(FindingVerdict.key_hash.in_(list(hashes)))
    out: dict[str, FindingVerdict] = {}
    for v in db.scalars(q.order_by(FindingVerdict.id)):
        out[v.key_hash] = v
    return out


@dataclass
class FindingEntry:
    row: FindingRow
    state: str
    verdict: FindingVerdict | None
    verdict_by: str
    #: the row's occurrences the viewer may see (blind annotation: app.services.blind)
    occurrences: list[dict[str, Any]]


def visible_occurrences(
    occurrences: list[dict[str, Any]], blind: set[int], username: str | None
) -> list[dict[str, Any]]:
    """The occurrences without other annotators' trees of the sentences in ``blind`` (those
    the viewer still annotates)."""
    return [
        o
        for o in occurrences
        if not (
            o.get("source") == "annotation"
            and o.get("sentence") in blind
            and o.get("by") != username
        )
    ]


@dataclass(kw_only=True)
class FindingPage(PageWindow):
    run: FindingRun | None
    pending: FindingRun | None
    entries: list[FindingEntry]
    counts: dict[str, int]  # per state


def _state(v: FindingVerdict | None) -> str:
    return v.verdict if v is not None else STATE_OPEN


def finding_page(
    db: Session,
    corpus_id: int,
    *,
    state: str = STATE_OPEN,
    kind: str | None = None,
    page: int = 1,
    per_page: int = 25,
    viewer: User | None = None,
) -> FindingPage:
    """One page of the newest run's findings in the given state, by rank, as ``viewer`` may
    see them (None: everything)."""
    if state not in FINDING_STATES:
        raise BadInput(f"unknown finding state {state!r}; one of {', '.join(FINDING_STATES)}")
    if kind and kind not in KINDS:
        raise BadInput(f"unknown finding kind {kind!r}; one of {', '.join(KINDS)}")
    per_page = min(max(per_page, 1), 200)
    page = max(page, 1)
    run = latest_run(db, corpus_id)
    pending = pending_run(db, corpus_id)
    if run is None:
        return FindingPage(
            run=None,
            pending=pending,
            entries=[],
            counts=dict.fromkeys(FINDING_STATES, 0),
            page=page,
            per_page=per_page,
            total=0,
        )
    where: list[Any] = [FindingRow.run_id == run.id]
    if kind:
        where.append(FindingRow.kind == kind)
    pairs = db.execute(
        select(FindingRow.id, FindingRow.key_hash).where(*where).order_by(FindingRow.rank)
    ).all()
    verdicts = verdicts_of(db, corpus_id)
    counts = dict.fromkeys(FINDING_STATES, 0)
    chosen: list[int] = []
    for fid, h in pairs:
        s = _state(verdicts.get(h))
        counts[s] += 1
        if s == state:
            chosen.append(fid)
    window = chosen[(page - 1) * per_page : page * per_page]
    rows = {r.id: r for r in db.scalars(select(FindingRow).where(FindingRow.id.in_(window)))}
    names = dict(db.execute(select(User.id, User.username)).all())
    blind: set[int] = set()
    if viewer is not None:
        blind = unfinished_sentences(
            db,
            viewer,
            {
                o["sentence"]
                for fid in window
                for o in rows[fid].occurrences
                if o.get("source") == "annotation"
            },
        )
    entries = []
    for fid in window:
        row = rows[fid]
        v = verdicts.get(row.key_hash)
        entries.append(
            FindingEntry(
                row,
                _state(v),
                v,
                names.get(v.user_id, "") if v and v.user_id else "",
                visible_occurrences(
                    list(row.occurrences), blind, viewer.username if viewer else None
                ),
            )
        )
    return FindingPage(
        run=run,
        pending=pending,
        entries=entries,
        counts=counts,
        page=page,
        per_page=per_page,
        total=len(chosen),
    )


def get_finding(db: Session, finding_id: int, corpus_id: int | None = None) -> FindingRow:
    row = db.get(FindingRow, finding_id)
    if row is None or (corpus_id is not None and row.corpus_id != corpus_id):
        raise NotFound(f"no finding with id {finding_id}")
    return row


def sentence_words(db: Session, sentence_ids: Sequence[int]) -> dict[int, list[str]]:
    """Tokens of the sentences a page of findings names."""
    if not sentence_ids:
        return {}
    return {
        sid: list(toks)
        for sid, toks in db.execute(
            select(Sentence.id, Sentence.tokens).where(Sentence.id.in_(list(set(sentence_ids))))
        )
    }
