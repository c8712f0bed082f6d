"""Review pages (adjudicators and admins): the list of sentences in review and one sentence.

The sentence page is complete as HTML (trees as indented bracketed text, the combined view as
server-drawn SVG); static/js/review.js draws the trees, runs the result panel (take a tree,
edit, validate, settle, reopen) through the JSON API in api_review.py, and the shortcuts.
The list also holds the held-back sentences with their ways out (release, drop, bring back;
app.services.held), as plain form posts that redirect back to the list.
"""

from __future__ import annotations

import json

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.deps import PageAdjudicator, SessionDep
from app.models import SENT_IN_REVIEW, Sentence
from app.services import held
from app.services import review as svc
from app.services.charts import span_ladder
from app.services.corpora import get_corpus
from app.web import render
from parser.trees import read_tree, write_tree

router = APIRouter(tags=["pages"], include_in_schema=False)


@router.get("/review", response_class=HTMLResponse)
def review_index(
    request: Request,
    login: PageAdjudicator,
    db: SessionDep,
    corpus: int | None = None,
    done: str | None = None,
) -> HTMLResponse:
    if corpus is not None:
        get_corpus(db, corpus)
    listing = svc.review_list(db, corpus)
    return render(
        request,
        "review_list.html",
        login,
        nav="review",
        listing=listing,
        held=held.held_back_list(db, corpus),
        dropped=held.dropped_list(db, corpus),
        token_fix_link=held.token_fix_link,
        done=HELD_DONE.get(done or ""),
        corpora=svc.corpus_choices(db),
        corpus_id=corpus,
    )


HELD_DONE = {
    "released": "The sentence is back in annotation; its annotators find it in their queues.",
    "dropped": "The sentence was dropped from the corpus. It is kept, with its history, under "
    "Dropped below, and can be brought back.",
    "restored": "The sentence is back in the corpus.",
}


def _held_step(sentence: Sentence, done: str) -> RedirectResponse:
    """Post/redirect/get back to the Review list's held-back section."""
    return RedirectResponse(
        f"/review?corpus={sentence.corpus_id}&done={done}#held", status_code=303
    )


@router.post("/review/held/{sentence_id}/release", response_class=HTMLResponse)
def held_release(
    sentence_id: int, login: PageAdjudicator, db: SessionDep, note: str = Form("")
) -> Response:
    return _held_step(held.release(db, sentence_id, login.user, note=note), "released")


@router.post("/review/held/{sentence_id}/drop", response_class=HTMLResponse)
def held_drop(
    sentence_id: int, login: PageAdjudicator, db: SessionDep, note: str = Form("")
) -> Response:
    return _held_step(held.drop(db, sentence_id, login.user, note=note), "dropped")


@router.post("/review/held/{sentence_id}/restore", response_class=HTMLResponse)
def held_restore(
    sentence_id: int, login: PageAdjudicator, db: SessionDep, note: str = Form("")
) -> Response:
    return _held_step(held.restore(db, sentence_id, login.user, note=note), "restored")


def _indented(text: str) -> str:
    return write_tree(read_tree(text), indent=True)


@router.get("/review/{sentence_id}", response_class=HTMLResponse)
def review_page(
    request: Request, sentence_id: int, login: PageAdjudicator, db: SessionDep
) -> HTMLResponse:
    detail = svc.review_detail(db, sentence_id, login.user)
    ladder = span_ladder(
        detail.words,
        detail.combined,
        len(detail.trees),
        title="Combined brackets of " + ", ".join(t.letter for t in detail.trees),
    )
    return render(
        request,
        "review.html",
        login,
        nav="review",
        d=detail,
        ladder=ladder,
        indented={t.letter: _indented(t.tree) for t in detail.trees},
        gold_indented={g.gold_id: _indented(g.tree) for g in detail.history},
        in_review=detail.sentence.state == SENT_IN_REVIEW,
        combined_json=json.dumps(
            [
                [c.start, c.end, c.kind, [[x.label, x.owners] for x in c.labels]]
                for c in detail.combined
            ]
        ),
    )
