"""The Search page: a pattern over a corpus's gold trees, annotations or sentences, as the
caller may see them; results a page at a time with the matching span marked in the words and
in the drawn tree (static/js/search.js with treeview.js), filterable by sentence state,
downloadable as bracketed text (the API's export route)."""

from __future__ import annotations

import re
from urllib.parse import urlencode

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, PlainTextResponse, RedirectResponse, Response

from app.deps import PageUser, SessionDep
from app.models import SENTENCE_STATES
from app.routes.pages_agreement import corpus_list
from app.services import search as svc
from app.services.errors import ServiceError
from app.services.visibility import readable_corpus
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)

SCOPE_NAMES = {
    svc.SCOPE_GOLD: "gold trees",
    svc.SCOPE_ANNOTATIONS: "annotations",
    svc.SCOPE_SENTENCES: "sentence words",
}


@router.get("/search", response_class=HTMLResponse)
def search_page(
    request: Request,
    login: PageUser,
    db: SessionDep,
    corpus: int | None = None,
    pattern: str = "",
    scope: str = "",
    state: str = "",
    page: int = 1,
) -> Response:
    corpora = corpus_list(db, login)
    if corpus is None:
        if corpora:
            return RedirectResponse(f"/search?corpus={corpora[0][0]}", status_code=303)
        return render(
            request, "search.html", login, nav="search", corpora=corpora, corpus_id=None, c=None
        )
    c = readable_corpus(db, corpus, login.user)
    scope = scope or svc.default_scope(c, login.user)
    results, error, status = None, "", 200
    if pattern.strip():
        try:
            results = svc.search(
                db, c, login.user, pattern, scope=scope, state=state or None, page=page
            )
        except ServiceError as err:
            error, status = str(err.detail), err.status_code
    query = {"pattern": pattern, "scope": scope, "state": state}
    return render(
        request,
        "search.html",
        login,
        status_code=status,
        nav="search",
        corpora=corpora,
        corpus_id=c.id,
        c=c,
        results=results,
        error=error,
        pattern=pattern,
        scope=scope,
        state=state,
        scopes=SCOPE_NAMES,
        states=SENTENCE_STATES,
        page_url=f"/search?corpus={c.id}&{urlencode(query)}",
        export_url=f"/search/export?corpus={c.id}&{urlencode(query)}",
    )


@router.get("/search/export")
def search_export(
    login: PageUser, db: SessionDep, corpus: int, pattern: str, scope: str = "", state: str = ""
) -> Response:
    """The matching trees as a bracketed-text file, one tree per line."""
    c = readable_corpus(db, corpus, login.user)
    scope = scope or svc.default_scope(c, login.user)
    text = svc.export_text(db, c, login.user, pattern, scope=scope, state=state or None)
    name = re.sub(r"[^A-Za-z0-9_.-]+", "_", c.name) + "-search.ptb"
    return PlainTextResponse(
        text, headers={"Content-Disposition": f'attachment; filename="{name}"'}
    )
