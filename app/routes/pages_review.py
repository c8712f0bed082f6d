"""Review pages (adjudicators and admins): the list of sentences in review and one sentence.

The sentence page is complete as HTML (trees as indented bracketed text, the combined view as
server-drawn SVG); static/js/review.js draws the trees, runs the result panel (take a tree,
edit, validate, settle, reopen) through the JSON API in api_review.py, and the shortcuts.
"""

from __future__ import annotations

import json

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from app.deps import PageAdjudicator, SessionDep
from app.models import SENT_IN_REVIEW
from app.services import review as svc
from app.services.charts import span_ladder
from app.services.corpora import get_corpus
from app.web import render
from parser.trees import read_tree, write_tree

router = APIRouter(tags=["pages"], include_in_schema=False)


@router.get("/review", response_class=HTMLResponse)
def review_index(request: Request, login: PageAdjudicator, db: SessionDep,
                 corpus: int | None = None) -> HTMLResponse:
    if corpus is not None:
        get_corpus(db, corpus)
    listing = svc.review_list(db, corpus)
    return render(request, "review_list.html", login, nav="review", listing=listing,
                  corpora=svc.corpus_choices(db), corpus_id=corpus)


def _indented(text: str) -> str:
    return write_tree(read_tree(text), indent=True)


@router.get("/review/{sentence_id}", response_class=HTMLResponse)
def review_page(request: Request, sentence_id: int, login: PageAdjudicator,
                db: SessionDep) -> HTMLResponse:
    detail = svc.review_detail(db, sentence_id)
    ladder = span_ladder(detail.words, detail.combined, len(detail.trees),
                         title="Combined brackets of " + ", ".join(t.letter for t in detail.trees))
    return render(request, "review.html", login, nav="review", d=detail, ladder=ladder,
                  indented={t.letter: _indented(t.tree) for t in detail.trees},
                  gold_indented={g.gold_id: _indented(g.tree) for g in detail.history},
                  in_review=detail.sentence.state == SENT_IN_REVIEW,
                  combined_json=json.dumps([[c.start, c.end, c.kind,
                                             [[x.label, x.owners] for x in c.labels]]
                                            for c in detail.combined]))
