"""The Queue page: the user's assigned sentences in order, with their progress."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, Response

from app.deps import PageUser, SessionDep
from app.services import annotation as svc
from app.services.corpora import find_corpus
from app.services.errors import BadInput
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)

PER_PAGE = 100


@router.get("/queue", response_class=HTMLResponse)
def queue_page(
    request: Request,
    login: PageUser,
    db: SessionDep,
    corpus: int | None = None,
    after: str | None = None,
    before: str | None = None,
) -> Response:
    """One page of the queue (``after`` / ``before`` a cursor), in the queue's order."""
    try:
        queue = svc.queue_page(
            db, login.user, corpus, after=after or None, before=before or None, limit=PER_PAGE
        )
    except BadInput:  # a mangled cursor: the first page
        queue = svc.queue_page(db, login.user, corpus, limit=PER_PAGE)
    corpora = svc.queue_corpora(db, login.user)
    chosen = find_corpus(db, corpus) if corpus is not None else None
    return render(
        request,
        "queue.html",
        login,
        nav="queue",
        queue=queue,
        items=queue.items,
        first_index=queue.first_index - 1,
        corpora=corpora,
        corpus_id=corpus,
        corpus_name=chosen.name if chosen else None,
        next_open=svc.next_open(db, login.user, corpus),
    )
