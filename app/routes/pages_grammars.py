"""The Grammars page: a corpus's grammar versions with their figures, the running job's
progress (static/js/grammars.js polls /api/grammars/{id}), and the "train now" form."""

from __future__ import annotations

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.deps import PageAdjudicator, PageUser, SessionDep, corpus_or_404
from app.routes.pages_agreement import corpus_list, learning_curve
from app.services import training
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)


@router.get("/grammars", response_class=HTMLResponse)
def grammars_page(request: Request, login: PageUser, db: SessionDep,
                  corpus: int | None = None, queued: int | None = None) -> Response:
    corpora = corpus_list(db)
    if corpus is None:
        if corpora:
            return RedirectResponse(f"/grammars?corpus={corpora[0][0]}", status_code=303)
        return render(request, "grammars.html", login, nav="grammars", corpora=corpora,
                      corpus_id=None, c=None)
    c = corpus_or_404(db, corpus)
    training.get_runner(request.app.state)  # picks up jobs queued while nobody ran them
    versions = training.versions(db, c.id)
    _, curve = learning_curve(db, c.id)
    every = c.options.retrain_every
    new_gold = training.new_gold_since_last(db, c)
    return render(request, "grammars.html", login, nav="grammars", corpora=corpora,
                  corpus_id=c.id, c=c, versions=versions, curve=curve,
                  gold=training.current_gold_count(db, c.id), new_gold=new_gold,
                  retrain_every=every, heldout_every=c.options.heldout_every,
                  max_f1_drop=c.options.max_f1_drop, open_job=training.open_job(db, c.id),
                  queued=queued)


@router.post("/grammars/train")
def train_now(request: Request, login: PageAdjudicator, corpus_id: int = Form(...)) -> Response:
    version = training.schedule_training(request.app.state, corpus_id,
                                         f"on demand by {login.user.username}", login.user.id)
    return RedirectResponse(f"/grammars?corpus={corpus_id}&queued={version.number}",
                            status_code=303)
