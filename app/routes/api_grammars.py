"""The Grammars JSON API: list a corpus's grammar versions, poll a job, train on demand.

The training runner is started with the service (``app.main.create_app``'s startup hooks),
so jobs queued while it was down (or by a request before it started) are picked up.
"""

from __future__ import annotations

from fastapi import APIRouter, Request
from pydantic import BaseModel, Field

from app.deps import ApiAdjudicator, ApiUser, Login, SessionDep
from app.models import GV_QUEUED, Corpus, GrammarVersion
from app.schemas.common import RequestModel, UtcDateTime
from app.services import training
from app.services.corpora import get_corpus
from app.services.visibility import readable_corpus

router = APIRouter(tags=["grammars"])


class GrammarVersionPublic(BaseModel):
    id: int
    corpus_id: int
    number: int
    status: str = Field(description="queued, training, ready, rejected or failed")
    progress: float = Field(description="0..1 while training")
    message: str
    active: bool
    reason: str | None
    training_size: int
    heldout_size: int
    heldout_f1: float | None
    heldout_scored: int | None = Field(
        default=None, description="held-out trees parsed to score it (a random sample)"
    )
    heldout_f1_low: float | None = Field(
        default=None, description="low end of the held-out F1's 95% interval"
    )
    heldout_f1_high: float | None = Field(
        default=None, description="high end of the held-out F1's 95% interval"
    )
    interval_method: str | None = None
    train_seconds: float | None
    gold_count_at_start: int
    created_at: UtcDateTime
    finished_at: UtcDateTime | None


class TrainCreate(RequestModel):
    corpus_id: int


def version_public(v: GrammarVersion, active_id: int | None) -> GrammarVersionPublic:
    held = (v.options or {}).get("heldout") or {}
    return GrammarVersionPublic(
        id=v.id,
        corpus_id=v.corpus_id,
        number=v.number,
        status=v.status,
        progress=v.progress,
        message=v.message,
        active=v.id == active_id,
        reason=(v.options or {}).get("reason"),
        training_size=v.training_size,
        heldout_size=v.heldout_size,
        heldout_f1=v.heldout_f1,
        heldout_scored=held.get("sentences"),
        heldout_f1_low=held.get("ci_low"),
        heldout_f1_high=held.get("ci_high"),
        interval_method=held.get("ci_method"),
        train_seconds=v.train_seconds,
        gold_count_at_start=v.gold_count_at_start,
        created_at=v.created_at,
        finished_at=v.finished_at,
    )


def _corpus(db: SessionDep, corpus_id: int, login: Login) -> Corpus:
    return readable_corpus(db, corpus_id, login.user)


@router.get("/api/grammars", response_model=list[GrammarVersionPublic])
def list_versions(corpus_id: int, login: ApiUser, db: SessionDep) -> list[GrammarVersionPublic]:
    """The corpus's grammar versions, newest first."""
    corpus = _corpus(db, corpus_id, login)
    return [version_public(v, corpus.active_grammar_id) for v in training.versions(db, corpus.id)]


@router.get("/api/grammars/{version_id}", response_model=GrammarVersionPublic)
def get_version(
    version_id: int, login: ApiUser, db: SessionDep, request: Request
) -> GrammarVersionPublic:
    """One version: poll this while it trains (status, progress, message)."""
    v = training.get_version(db, version_id)
    if v.status == GV_QUEUED:
        training.get_runner(request.app.state)  # starts a job nobody has picked up yet
    corpus = _corpus(db, v.corpus_id, login)
    return version_public(v, corpus.active_grammar_id)


@router.post("/api/grammars", response_model=GrammarVersionPublic, status_code=202)
def train_now(
    body: TrainCreate, login: ApiAdjudicator, db: SessionDep, request: Request
) -> GrammarVersionPublic:
    """Queue the corpus's next version now (or return the job already queued or training)."""
    corpus = _corpus(db, body.corpus_id, login)
    v = training.schedule_training(
        request.app.state, corpus.id, f"on demand by {login.user.username}", login.user.id
    )
    # the job was queued in a session of its own: read the corpus again
    return version_public(v, get_corpus(db, corpus.id, fresh=True).active_grammar_id)
