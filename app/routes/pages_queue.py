"""The Queue page: the user's assigned sentences in order, with their progress."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, Response

from app.deps import PageUser, SessionDep
from app.services import annotation as svc
from app.services.corpora import find_corpus
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)

PER_PAGE = 100


@router.get("/queue", response_class=HTMLResponse)
def queue_page(request: Request, login: PageUser, db: SessionDep, corpus: int | None = None,
               page: int = 1) -> Response:
    everything = svc.queue_for(db, login.user)
    queue = svc.Queue(items=[it for it in everything.items
                             if corpus is None or it.corpus_id == corpus])
    pages = max(1, -(-queue.total // PER_PAGE))
    page = min(max(1, page), pages)
    items = queue.items[(page - 1) * PER_PAGE: page * PER_PAGE]
    corpora = {it.corpus_id: it.corpus_name for it in everything.items}
    chosen = find_corpus(db, corpus) if corpus is not None else None
    return render(request, "queue.html", login, nav="queue", queue=queue, items=items,
                  page=page, pages=pages, first_index=(page - 1) * PER_PAGE,
                  corpora=sorted(corpora.items(), key=lambda kv: kv[1]),
                  corpus_id=corpus, corpus_name=chosen.name if chosen else None,
                  next_open=queue.next_open())
