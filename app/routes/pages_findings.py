"""The Findings page (adjudicators and admins): a corpus's inconsistencies, most suspicious
first, a page at a time, filtered by state and kind; each finding lists its occurrences (the
sentence with the span marked, the analysis, who settled it, a link to Review) and offers
"fine as is" and "reopen its sentences". Runs of the finder are asked for here too."""

from __future__ import annotations

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.deps import PageAdjudicator, SessionDep, corpus_or_404
from app.routes.pages_agreement import corpus_list
from app.services import finding_actions as actions
from app.services import findings as svc
from app.services.errors import BadInput
from app.web import render
from parser.variation import KINDS

router = APIRouter(tags=["pages"], include_in_schema=False)

KIND_NAMES = {"bracket": "bracketing", "tag": "POS tag", "rule": "rare rule"}
STATE_NAMES = {"open": "open", "fine_as_is": "fine as is", "reopened": "reopened"}


def _back(corpus_id: int, state: str, kind: str, page: int, done: str = "") -> str:
    url = f"/findings?corpus={corpus_id}&state={state}&page={page}"
    if kind:
        url += f"&kind={kind}"
    return url + (f"&done={done}" if done else "")


@router.get("/findings", response_class=HTMLResponse)
def findings_page(
    request: Request,
    login: PageAdjudicator,
    db: SessionDep,
    corpus: int | None = None,
    state: str = "open",
    kind: str = "",
    page: int = 1,
    done: str = "",
) -> Response:
    corpora = corpus_list(db, login)
    if corpus is None:
        if corpora:
            return RedirectResponse(f"/findings?corpus={corpora[0][0]}", status_code=303)
        return render(
            request, "findings.html", login, nav="findings", corpora=corpora, corpus_id=None, c=None
        )
    c = corpus_or_404(db, corpus)
    listing = svc.finding_page(
        db, c.id, state=state, kind=kind or None, page=page, viewer=login.user
    )
    sentence_ids = [o["sentence"] for e in listing.entries for o in e.occurrences]
    return render(
        request,
        "findings.html",
        login,
        nav="findings",
        corpora=corpora,
        corpus_id=c.id,
        c=c,
        listing=listing,
        state=state,
        kind=kind,
        kinds=KINDS,
        kind_names=KIND_NAMES,
        state_names=STATE_NAMES,
        words=svc.sentence_words(db, sentence_ids),
        done=done,
    )


@router.post("/findings/run")
def run_now(
    request: Request,
    login: PageAdjudicator,
    corpus_id: int = Form(...),
    with_annotations: str = Form(""),
) -> Response:
    actions.request_run(
        request.app.state, corpus_id, user=login.user, with_annotations=with_annotations == "on"
    )
    return RedirectResponse(f"/findings?corpus={corpus_id}&done=queued", status_code=303)


@router.post("/findings/{finding_id}/verdict")
def verdict(
    request: Request,
    finding_id: int,
    login: PageAdjudicator,
    db: SessionDep,
    corpus_id: int = Form(...),
    action: str = Form(...),
    note: str = Form(""),
    state: str = Form("open"),
    kind: str = Form(""),
    page: int = Form(1),
) -> Response:
    c = corpus_or_404(db, corpus_id)
    if action == "fine":
        actions.mark_fine(db, c.id, finding_id, login.user, note=note)
        done = "fine"
    elif action == "reopen":
        result = actions.reopen_finding(db, c.id, finding_id, login.user, note=note)
        done = f"reopened-{len(result.sentence_ids)}"
    else:
        raise BadInput(f"unknown action {action!r}; 'fine' or 'reopen'")
    return RedirectResponse(_back(c.id, state, kind, page, done), status_code=303)
