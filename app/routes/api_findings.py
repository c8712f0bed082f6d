"""The Findings JSON API (adjudicators and admins): the newest run's findings of a corpus, a
new run on request, and the verdicts "fine as is" and "reopen its sentences".

Errors: 404 for an unknown corpus or finding; 409 when a named sentence changed meanwhile;
422 for an unknown state or kind, or a note that is too long.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from pydantic import BaseModel, Field

from app.deps import ApiAdjudicator, CorpusDep, SessionDep
from app.models import FindingRun
from app.schemas.common import ErrorPublic, RequestModel, UtcDateTime
from app.services import finding_actions as actions
from app.services import findings as svc

router = APIRouter(tags=["findings"])

ERRORS: dict[int | str, dict[str, Any]] = {
    404: {"model": ErrorPublic, "description": "no such corpus or finding"},
    409: {"model": ErrorPublic, "description": "a sentence changed meanwhile"},
    422: {"model": ErrorPublic, "description": "an unknown state or kind, or a long note"},
}


class RunPublic(BaseModel):
    id: int
    status: str = Field(description="queued, running, done or failed")
    reason: str
    with_annotations: bool
    trees: int
    seconds: float | None
    message: str
    created_at: UtcDateTime
    finished_at: UtcDateTime | None


class OccurrencePublic(BaseModel):
    sentence: int
    start: int
    end: int = Field(description="span over the sentence's words, end exclusive")
    analysis: str = Field(
        description="labels over the span top down joined by '+' ('' for "
        "none), the POS tag, or the rule"
    )
    source: str = Field(description="gold or annotation")
    by: str = Field(description="who settled the gold (or 'import', 'agreement'), or the annotator")


class FindingPublic(BaseModel):
    id: int
    kind: str = Field(description="bracket, tag or rule")
    key: str
    rank: int
    score: float
    summary: str
    state: str = Field(description="open, fine_as_is or reopened")
    occurrences: list[OccurrencePublic]
    detail: dict[str, Any]


class FindingPagePublic(BaseModel):
    run: RunPublic | None = Field(description="the newest finished run")
    pending: RunPublic | None = Field(description="a queued or running run")
    findings: list[FindingPublic]
    counts: dict[str, int] = Field(description="findings per state in the newest run")
    page: int
    pages: int
    total: int


class RunCreate(RequestModel):
    with_annotations: bool = Field(
        False, description="also read submitted annotations of sentences that are not gold yet"
    )


class VerdictCreate(RequestModel):
    note: str | None = None


class VerdictPublic(BaseModel):
    finding_id: int
    state: str
    reopened: list[int] = Field(default_factory=list, description="sentences sent to review")
    skipped: list[int] = Field(
        default_factory=list, description="named sentences that were not gold"
    )


def run_public(run: FindingRun | None) -> RunPublic | None:
    if run is None:
        return None
    return RunPublic(
        id=run.id,
        status=run.status,
        reason=run.reason,
        with_annotations=run.with_annotations,
        trees=run.trees,
        seconds=run.seconds,
        message=run.message,
        created_at=run.created_at,
        finished_at=run.finished_at,
    )


@router.get("/api/corpora/{corpus_id}/findings", response_model=FindingPagePublic, responses=ERRORS)
def list_findings(
    login: ApiAdjudicator,
    corpus: CorpusDep,
    db: SessionDep,
    state: str = "open",
    kind: str | None = None,
    page: int = 1,
    per_page: int = 25,
) -> FindingPagePublic:
    """The newest run's findings in one state, most suspicious first, a page at a time."""
    found = svc.finding_page(
        db, corpus.id, state=state, kind=kind, page=page, per_page=per_page, viewer=login.user
    )
    return FindingPagePublic(
        run=run_public(found.run),
        pending=run_public(found.pending),
        findings=[
            FindingPublic(
                id=e.row.id,
                kind=e.row.kind,
                key=e.row.key,
                rank=e.row.rank,
                score=e.row.score,
                summary=e.row.summary,
                state=e.state,
                occurrences=[
                    OccurrencePublic(
                        **{
                            k: o[k]
                            for k in ("sentence", "start", "end", "analysis", "source", "by")
                        }
                    )
                    for o in e.occurrences
                ],
                detail=e.row.detail,
            )
            for e in found.entries
        ],
        counts=found.counts,
        page=found.page,
        pages=found.pages,
        total=found.total,
    )


@router.post(
    "/api/corpora/{corpus_id}/findings/runs",
    response_model=RunPublic,
    status_code=202,
    responses=ERRORS,
)
def start_run(
    login: ApiAdjudicator, corpus: CorpusDep, body: RunCreate, request: Request
) -> RunPublic:
    """Queue a run of the finder; it runs in the background (poll the list's ``pending``)."""
    run = actions.request_run(
        request.app.state, corpus.id, user=login.user, with_annotations=body.with_annotations
    )
    out = run_public(run)
    assert out is not None
    return out


@router.post(
    "/api/corpora/{corpus_id}/findings/{finding_id}/fine",
    response_model=VerdictPublic,
    responses=ERRORS,
)
def mark_fine(
    login: ApiAdjudicator, corpus: CorpusDep, finding_id: int, body: VerdictCreate, db: SessionDep
) -> VerdictPublic:
    """Keep the finding as it is: no longer listed as open, in this run or later ones."""
    v = actions.mark_fine(db, corpus.id, finding_id, login.user, note=body.note)
    return VerdictPublic(finding_id=finding_id, state=v.verdict)


@router.post(
    "/api/corpora/{corpus_id}/findings/{finding_id}/reopen",
    response_model=VerdictPublic,
    responses=ERRORS,
)
def reopen(
    login: ApiAdjudicator, corpus: CorpusDep, finding_id: int, body: VerdictCreate, db: SessionDep
) -> VerdictPublic:
    """Send every gold sentence the finding names back to review (their gold is kept)."""
    done = actions.reopen_finding(db, corpus.id, finding_id, login.user, note=body.note)
    return VerdictPublic(
        finding_id=finding_id,
        state=done.verdict.verdict,
        reopened=done.sentence_ids,
        skipped=done.skipped,
    )
