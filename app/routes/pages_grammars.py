"""The Grammars page: a corpus's grammar versions with their figures, the running job's
progress (static/js/grammars.js polls /api/grammars/{id}), and the "train now" form."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, File, Form, Request, UploadFile
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from starlette.concurrency import run_in_threadpool

from app.deps import Login, PageAdjudicator, PageAdmin, PageUser, SessionDep
from app.routes.pages_agreement import corpus_list, learning_curve
from app.services import reference, training
from app.services.errors import ServiceError
from app.services.visibility import readable_corpus
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)


@router.get("/grammars", response_class=HTMLResponse)
def grammars_page(
    request: Request,
    login: PageUser,
    db: SessionDep,
    corpus: int | None = None,
    queued: int | None = None,
) -> Response:
    corpora = corpus_list(db, login)
    if corpus is None:
        if corpora:
            return RedirectResponse(f"/grammars?corpus={corpora[0][0]}", status_code=303)
        return render(
            request, "grammars.html", login, nav="grammars", corpora=corpora, corpus_id=None, c=None
        )
    return _page(request, login, db, corpus, queued=queued)


def _page(
    request: Request,
    login: Login,
    db: SessionDep,
    corpus_id: int,
    *,
    status_code: int = 200,
    **extra: Any,
) -> Response:
    c = readable_corpus(db, corpus_id, login.user)
    training.get_runner(request.app.state)  # picks up jobs queued while nobody ran them
    versions = training.versions(db, c.id)
    _, curve = learning_curve(db, c.id)
    gold = training.current_gold_count(db, c.id)
    every = training.retrain_interval(c.options, gold)
    new_gold = training.new_gold_since_last(db, c)
    response = render(
        request,
        "grammars.html",
        login,
        nav="grammars",
        corpora=corpus_list(db, login),
        corpus_id=c.id,
        c=c,
        versions=versions,
        curve=curve,
        gold=gold,
        new_gold=new_gold,
        retrain_every=every,
        heldout_every=c.options.heldout_every,
        max_f1_drop=c.options.max_f1_drop,
        open_job=training.open_job(db, c.id),
        references=reference.reference_sets(db, c.id),
        reference_names=reference.names_by_id(db, c.id),
        **extra,
    )
    response.status_code = status_code
    return response


@router.post("/grammars/reference", response_class=HTMLResponse)
async def add_reference(
    request: Request,
    login: PageAdmin,
    db: SessionDep,
    corpus_id: int = Form(...),
    upload: UploadFile = File(...),
    name: str = Form(""),
    source: str = Form(""),
    licence: str = Form(""),
) -> Response:
    data = await upload.read()
    try:
        # reading a whole treebank takes seconds: off the event loop
        added = await run_in_threadpool(
            reference.add_reference,
            db,
            corpus_id,
            data,
            name=name,
            source=source,
            licence=licence,
            filename=upload.filename or "upload",
            user=login.user,
        )
    except ServiceError as err:
        return _page(
            request,
            login,
            db,
            corpus_id,
            status_code=err.status_code,
            reference_error=str(err.detail),
            reference_form={"name": name, "source": source, "licence": licence},
        )
    return _page(request, login, db, corpus_id, reference_added=added)


@router.post("/grammars/reference/{reference_id}/use")
def use_reference(
    reference_id: int,
    login: PageAdmin,
    db: SessionDep,
    corpus_id: int = Form(...),
    in_use: bool = Form(False),
) -> Response:
    reference.set_in_use(db, reference_id, in_use, user=login.user)
    return RedirectResponse(f"/grammars?corpus={corpus_id}", status_code=303)


@router.post("/grammars/train")
def train_now(request: Request, login: PageAdjudicator, corpus_id: int = Form(...)) -> Response:
    version = training.schedule_training(
        request.app.state, corpus_id, f"on demand by {login.user.username}", login.user.id
    )
    return RedirectResponse(
        f"/grammars?corpus={corpus_id}&queued={version.number}", status_code=303
    )
