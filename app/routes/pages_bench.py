"""The Bench page: one sentence's tree editor (the data is embedded; bench.js draws it).

When the sentence's suggestion is still to be parsed and the parse pool does not answer within
``parse_page_wait_seconds``, the page is drawn as a waiting page with the parse's place in line;
bench_wait.js asks ``/api/bench/{id}/place`` every second (a read that never waits) and loads
the Bench again once the parse is done. No request holds a thread for the whole wait.
"""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.deps import PageUser, SessionDep
from app.routes.api_annotations import bench_payload
from app.services import annotation as svc
from app.services.admission import ParserBusy
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)


@router.get("/bench", response_class=HTMLResponse)
def bench_next(login: PageUser, db: SessionDep) -> Response:
    """The first sentence of the user's queue not yet handed in or held back."""
    target = svc.next_open(db, login.user)
    return RedirectResponse(f"/bench/{target}" if target else "/queue", status_code=303)


@router.get("/bench/{sentence_id}", response_class=HTMLResponse)
def bench_page(sentence_id: int, request: Request, login: PageUser, db: SessionDep) -> Response:
    settings = request.app.state.settings
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    try:
        data = bench_payload(
            db, login.user, sentence, settings.suggestion_k, wait=settings.parse_page_wait_seconds
        )
    except ParserBusy as busy:
        return render(
            request,
            "bench_wait.html",
            login,
            nav="queue",
            sentence=sentence,
            ahead=int(busy.extra.get("ahead", 0)),
        )
    return render(
        request,
        "bench.html",
        login,
        nav="queue",
        data=data,
        bench_json=data.model_dump(mode="json"),
    )
