"""The Search JSON API: a pattern (parser.treequery) over a corpus's sentences, gold trees or
annotations, as the caller may see them (app.services.search), and the matching trees as
bracketed text.

Errors: 403 when an annotator asks for gold the corpus keeps from annotators; 404 for an
unknown corpus; 422 for a malformed pattern (``column`` says where), an unknown scope or
state, or a bracketed fragment over the sentences' words.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter
from pydantic import BaseModel, Field

from app.deps import ApiUser, CorpusDep, SessionDep
from app.schemas.common import ErrorPublic
from app.services import search as svc
from app.services.visibility import readable_corpus

router = APIRouter(tags=["search"])

ERRORS: dict[int | str, dict[str, Any]] = {
    403: {"model": ErrorPublic, "description": "the gold is not open to annotators here"},
    404: {"model": ErrorPublic, "description": "no such corpus"},
    422: {"model": ErrorPublic, "description": "a malformed pattern, scope or state"},
}


class SearchPagePublic(BaseModel):
    pattern: str
    scope: str = Field(description="sentences, gold or annotations")
    state: str | None
    hits: list[svc.SearchHit] = Field(
        description="one per matching tree (or sentence); spans are word positions, end exclusive"
    )
    page: int
    pages: int
    total: int


@router.get("/api/corpora/{corpus_id}/search", response_model=SearchPagePublic, responses=ERRORS)
def search(
    login: ApiUser,
    corpus: CorpusDep,
    db: SessionDep,
    pattern: str,
    scope: str = svc.SCOPE_GOLD,
    state: str | None = None,
    page: int = 1,
    per_page: int = 20,
) -> SearchPagePublic:
    """Sentences whose trees (or words) match the pattern, in document order."""
    readable_corpus(db, corpus.id, login.user)
    found = svc.search(
        db,
        corpus,
        login.user,
        pattern,
        scope=scope,
        state=state or None,
        page=page,
        per_page=per_page,
    )
    return SearchPagePublic(
        pattern=found.pattern,
        scope=found.scope,
        state=found.state,
        hits=found.hits,
        page=found.page,
        pages=found.pages,
        total=found.total,
    )


class SearchExportPublic(BaseModel):
    pattern: str
    scope: str
    count: int = Field(description="how many trees (or sentences) matched")
    text: str = Field(
        description="every matching tree as one-line bracketed text, one per "
        "line (for the sentences scope: the words)"
    )


@router.get(
    "/api/corpora/{corpus_id}/search/export", response_model=SearchExportPublic, responses=ERRORS
)
def export(
    login: ApiUser,
    corpus: CorpusDep,
    db: SessionDep,
    pattern: str,
    scope: str = svc.SCOPE_GOLD,
    state: str | None = None,
) -> SearchExportPublic:
    """Every matching tree as bracketed text (the Search page offers it as a file)."""
    readable_corpus(db, corpus.id, login.user)
    text = svc.export_text(db, corpus, login.user, pattern, scope=scope, state=state or None)
    return SearchExportPublic(pattern=pattern, scope=scope, count=text.count("\n"), text=text)
