"""The Review JSON API (adjudicators and admins): the list, one sentence, check, settle, reopen.

Errors: 404 for an unknown sentence; 409 when the sentence is not (or no longer) in the state
the action needs; 422 with ``kind`` for a tree that does not fit the sentence (the same kinds
as the Bench: brackets with line/column, words, labels, shape) or a bad source.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from pydantic import BaseModel, Field

from app.deps import ApiAdjudicator, SessionDep
from app.schemas.common import RequestModel
from app.services import gold, held
from app.services import review as svc
from app.services.corpora import get_corpus
from app.services.training import get_runner

router = APIRouter(tags=["review"])


class ErrorPublic(BaseModel):
    detail: Any
    kind: str | None = None


ERRORS: dict[int | str, dict[str, Any]] = {
    404: {"model": ErrorPublic, "description": "no such sentence"},
    409: {"model": ErrorPublic, "description": "the sentence is not in the needed state"},
    422: {"model": ErrorPublic, "description": "a tree or source that does not fit"},
}


# The row types are the service's dataclasses; FastAPI documents them like pydantic models.
class ReviewListPublic(BaseModel):
    waiting: list[svc.WaitingRow]
    settled: list[svc.SettledRow]


class ReviewPublic(BaseModel):
    sentence_id: int
    corpus_id: int
    corpus_name: str
    document: str
    position: int
    state: str
    words: list[str]
    trees: list[svc.ReviewTree] = Field(
        description="submitted trees; letter A, B... names each annotator's tree on the page"
    )
    combined: list[svc.CombinedSpan] = Field(
        description="every bracketed span; kind all, split or some"
    )
    pairs: list[svc.PairRow]
    history: list[svc.GoldEntry] = Field(
        description="gold trees of the sentence, newest first; retired ones keep retired_at"
    )
    labels: list[str]
    tags: list[str]
    prev_id: int | None
    next_id: int | None


class TreeCheck(RequestModel):
    tree: str = Field(max_length=200_000)
    confirm_labels: bool = False


class TreeCheckPublic(BaseModel):
    tree: str = Field(description="the tree in canonical one-line form")
    words: list[str]


class SettleCreate(RequestModel):
    tree: str = Field(max_length=200_000, description="bracketed text of the gold tree")
    source_annotation_id: int | None = Field(
        default=None, description="the submitted annotation the adjudicator started from"
    )
    source_gold_id: int | None = Field(
        default=None, description="or the earlier gold tree started from"
    )
    note: str | None = Field(default=None, max_length=4_000)
    confirm_labels: bool = False


class ReopenCreate(RequestModel):
    note: str | None = Field(default=None, max_length=4_000)


class HeldActionCreate(RequestModel):
    note: str | None = Field(default=None, max_length=4_000)


class SentenceStatePublic(BaseModel):
    sentence_id: int
    state: str


class HeldListPublic(BaseModel):
    held: list[held.HeldRow]


def detail_public(detail: svc.ReviewDetail) -> ReviewPublic:
    s = detail.sentence
    return ReviewPublic(
        sentence_id=s.id,
        corpus_id=s.corpus_id,
        corpus_name=detail.corpus.name,
        document=detail.document,
        position=s.position,
        state=s.state,
        words=detail.words,
        trees=detail.trees,
        combined=detail.combined,
        pairs=detail.pairs,
        history=detail.history,
        labels=sorted(detail.corpus.label_set or []),
        tags=sorted(detail.corpus.tag_set or []),
        prev_id=detail.neighbours[0],
        next_id=detail.neighbours[1],
    )


@router.get("/api/review", response_model=ReviewListPublic)
def list_review(
    login: ApiAdjudicator, db: SessionDep, corpus_id: int | None = None
) -> ReviewListPublic:
    """Sentences waiting in review (longest waiting first) and the latest gold decisions."""
    if corpus_id is not None:
        get_corpus(db, corpus_id)
    found = svc.review_list(db, corpus_id)
    return ReviewListPublic(waiting=found.waiting, settled=found.settled)


@router.get("/api/review/{sentence_id}", response_model=ReviewPublic, responses=ERRORS)
def get_review(sentence_id: int, login: ApiAdjudicator, db: SessionDep) -> ReviewPublic:
    """The submitted trees with their annotators, the combined view, figures, gold history."""
    return detail_public(svc.review_detail(db, sentence_id, login.user))


@router.post("/api/review/{sentence_id}/check", response_model=TreeCheckPublic, responses=ERRORS)
def check_tree(
    sentence_id: int, body: TreeCheck, login: ApiAdjudicator, db: SessionDep
) -> TreeCheckPublic:
    """Validate a tree for this sentence without storing anything (422 says what is wrong)."""
    from parser.trees import words, write_tree

    tree = svc.check_tree(db, sentence_id, body.tree, confirm_labels=body.confirm_labels)
    return TreeCheckPublic(tree=write_tree(tree), words=words(tree))


@router.post("/api/review/{sentence_id}/settle", response_model=ReviewPublic, responses=ERRORS)
def settle(
    sentence_id: int, body: SettleCreate, login: ApiAdjudicator, db: SessionDep, request: Request
) -> ReviewPublic:
    """Make ``tree`` the sentence's gold (provenance: you, the source, now, the note)."""
    get_runner(request.app.state)  # a retraining this settle makes due starts on commit
    svc.settle(
        db,
        sentence_id,
        login.user,
        tree_text=body.tree,
        source_annotation_id=body.source_annotation_id,
        source_gold_id=body.source_gold_id,
        note=body.note,
        confirm_labels=body.confirm_labels,
    )
    return detail_public(svc.review_detail(db, sentence_id, login.user))


@router.post("/api/review/{sentence_id}/reopen", response_model=ReviewPublic, responses=ERRORS)
def reopen(
    sentence_id: int, body: ReopenCreate, login: ApiAdjudicator, db: SessionDep
) -> ReviewPublic:
    """Retire the current gold (it stays in the history) and put the sentence back in review."""
    gold.reopen(db, sentence_id, login.user, note=body.note)
    return detail_public(svc.review_detail(db, sentence_id, login.user))


@router.get("/api/held", response_model=HeldListPublic)
def list_held(
    login: ApiAdjudicator, db: SessionDep, corpus_id: int | None = None
) -> HeldListPublic:
    """Held-back sentences (longest held first) with each hold's reason, note and annotator."""
    if corpus_id is not None:
        get_corpus(db, corpus_id)
    return HeldListPublic(held=held.held_back_list(db, corpus_id))


@router.post(
    "/api/review/{sentence_id}/release", response_model=SentenceStatePublic, responses=ERRORS
)
def release(
    sentence_id: int, body: HeldActionCreate, login: ApiAdjudicator, db: SessionDep
) -> SentenceStatePublic:
    """Lift every hold on a held-back sentence: back to annotation (409 if not held back)."""
    s = held.release(db, sentence_id, login.user, note=body.note)
    return SentenceStatePublic(sentence_id=s.id, state=s.state)


@router.post("/api/review/{sentence_id}/drop", response_model=SentenceStatePublic, responses=ERRORS)
def drop(
    sentence_id: int, body: HeldActionCreate, login: ApiAdjudicator, db: SessionDep
) -> SentenceStatePublic:
    """Drop a held-back or open sentence from the corpus (kept, out of queue and export)."""
    s = held.drop(db, sentence_id, login.user, note=body.note)
    return SentenceStatePublic(sentence_id=s.id, state=s.state)


@router.post(
    "/api/review/{sentence_id}/restore", response_model=SentenceStatePublic, responses=ERRORS
)
def restore(
    sentence_id: int, body: HeldActionCreate, login: ApiAdjudicator, db: SessionDep
) -> SentenceStatePublic:
    """Bring a dropped sentence back (held back again if a hold is still on it)."""
    s = held.restore(db, sentence_id, login.user, note=body.note)
    return SentenceStatePublic(sentence_id=s.id, state=s.state)
