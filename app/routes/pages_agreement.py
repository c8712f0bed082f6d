"""The Agreement page: how far the annotators of a corpus agree, where they differ, how the
parser's held-out F1 grows with gold; and the agreement log as CSV."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.deps import Login, PageUser, SessionDep
from app.models import GrammarVersion
from app.services import agreement, corpora, effort, training
from app.services.charts import Point, Series, line_chart, score_bar
from app.services.exports import slug
from app.services.visibility import readable, readable_corpus
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)


def corpus_list(db: SessionDep, login: Login) -> list[tuple[int, str, int]]:
    """The corpora ``login`` may read, for a page's corpus chooser."""
    return [(c.id, c.name, 0) for c in readable(db, login.user, corpora.corpus_list(db))]


def learning_curve(db: SessionDep, corpus_id: int) -> tuple[list[GrammarVersion], object]:
    """The scored versions (oldest first) and their chart: held-out F1 by training size."""
    scored = training.scored_versions(db, corpus_id)
    series = [
        Series(
            "held-out F1",
            [
                Point(
                    v.training_size,
                    v.heldout_f1 or 0.0,
                    f"version {v.number}: {v.heldout_f1:.3f} "
                    f"({v.training_size} gold trees, {v.status}; "
                    f"{training.weight_text(v)})",
                )
                for v in scored
            ],
            css="s2",
        )
    ]
    # The reference-only start: what the reference trees alone score on the same held-out
    # gold, so the gain from the corpus's own trees can be read off against it.
    alone = [(v, f) for v in scored if (f := training.reference_only_f1(v)) is not None]
    if alone:
        series.append(
            Series(
                "reference trees alone",
                [
                    Point(
                        v.training_size,
                        f,
                        f"version {v.number}: the reference trees alone score "
                        f"{f:.3f} on its held-out gold",
                    )
                    for v, f in alone
                ],
                css="s1",
            )
        )
    chart = line_chart(
        series,
        title="Parser F1 on held-out gold by grammar version",
        x_title="gold trees in training",
        y_title="held-out F1",
    )
    return scored, chart


@router.get("/agreement", response_class=HTMLResponse)
def agreement_page(
    request: Request, login: PageUser, db: SessionDep, corpus: int | None = None
) -> Response:
    corpora = corpus_list(db, login)
    if corpus is None:
        if len(corpora) >= 1:
            return RedirectResponse(f"/agreement?corpus={corpora[0][0]}", status_code=303)
        return render(
            request,
            "agreement.html",
            login,
            nav="agreement",
            corpora=corpora,
            corpus_id=None,
            c=None,
        )
    c = readable_corpus(db, corpus, login.user)
    fig = agreement.corpus_figures(db, c.id, viewer=login.user)
    fmt = "%Y-%m-%d"
    labels = [p.start.strftime(fmt) for p in fig.periods]
    over_time = line_chart(
        [
            Series(
                "labelled F1",
                [
                    Point(i, p.counts.f1, f"{labels[i]}: {p.counts.f1:.3f} over {p.records} pairs")
                    for i, p in enumerate(fig.periods)
                ],
                css="s1",
            )
        ],
        title=f"Labelled F1 between annotators per {fig.period}",
        categories=labels,
        x_title=f"{fig.period} the pairs were logged",
        y_title="labelled F1",
    )
    scored, curve = learning_curve(db, c.id)
    return render(
        request,
        "agreement.html",
        login,
        nav="agreement",
        corpora=corpora,
        corpus_id=c.id,
        c=c,
        fig=fig,
        over_time=over_time,
        curve=curve,
        scored=scored,
        bar=score_bar,
        effort_columns=effort.EFFORT_COLUMNS,
        effort_rows=effort.effort_rows(*effort.effort_figures(db, c.id)),
    )


def _csv_download(body: str, corpus_name: str, what: str) -> Response:
    return Response(
        body,
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": f'attachment; filename="{slug(corpus_name)}-{what}.csv"'},
    )


@router.get("/agreement/effort.csv")
def effort_csv(login: PageUser, db: SessionDep, corpus: int) -> Response:
    c = readable_corpus(db, corpus, login.user)
    return _csv_download(effort.effort_csv(db, c.id), c.name, "effort")


@router.get("/agreement/log.csv")
def agreement_csv(login: PageUser, db: SessionDep, corpus: int) -> Response:
    c = readable_corpus(db, corpus, login.user)
    return _csv_download(agreement.agreement_csv(db, c.id, viewer=login.user), c.name, "agreement")
