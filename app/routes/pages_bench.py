"""The Bench page: one sentence's tree editor (the data is embedded; bench.js draws it)."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.deps import PageUser, SessionDep
from app.routes.api_annotations import bench_payload
from app.services import annotation as svc
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)


@router.get("/bench", response_class=HTMLResponse)
def bench_next(login: PageUser, db: SessionDep) -> Response:
    """The first sentence of the user's queue not yet handed in or held back."""
    target = svc.next_open(db, login.user)
    return RedirectResponse(f"/bench/{target}" if target else "/queue", status_code=303)


@router.get("/bench/{sentence_id}", response_class=HTMLResponse)
def bench_page(sentence_id: int, request: Request, login: PageUser, db: SessionDep) -> Response:
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    data = bench_payload(db, login.user, sentence, request.app.state.settings.suggestion_k)
    return render(
        request,
        "bench.html",
        login,
        nav="queue",
        data=data,
        bench_json=data.model_dump(mode="json"),
    )
