"""The Transfer page: import a file (admins) and download gold (adjudicators and admins).

An import is checked, staged in short transactions and published at once; a refused file shows the
reason with its line and column and nothing of it is stored; a stored one redirects to the
page with its report (read back from the import's event, so a reload imports nothing). An
export is a download: one ``.ptb`` file, or with a split a ``.zip`` holding the train, dev and
test files. A split that would leave a part empty is not downloaded at once: the page says
which part, how to get a split with no empty part (a link for each way), and offers the split
as it is.
"""

from __future__ import annotations

from typing import Any
from urllib.parse import urlencode

from fastapi import APIRouter, File, Form, Request, UploadFile
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.deps import Login, PageAdjudicator, PageAdmin, PageUser, SessionDep
from app.services.corpora import corpus_list, document_choices, find_corpus
from app.services.errors import BadInput, ServiceError
from app.services.exports import SplitSpec, export_gold, parse_ratios, record_export, slug
from app.services.imports import KINDS, TOKENIZERS, ImportReport, import_report
from app.services.staged_import import import_handle
from app.services.users import active_users
from app.services.visibility import readable
from app.web import render

router = APIRouter(tags=["pages"], include_in_schema=False)


def _page(
    request: Request,
    login: Login,
    db: SessionDep,
    *,
    status_code: int = 200,
    result: ImportReport | None = None,
    error: str | None = None,
    export_error: str | None = None,
    form: dict[str, Any] | None = None,
    corpus_id: int | None = None,
    split_warning: dict[str, Any] | None = None,
) -> HTMLResponse:
    corpora = readable(db, login.user, corpus_list(db))
    documents = document_choices(db)
    people = active_users(db) if login.user.is_admin else []
    return render(
        request,
        "transfer.html",
        login,
        status_code=status_code,
        nav="transfer",
        corpora=corpora,
        documents=documents,
        people=people,
        kinds=KINDS,
        tokenizers=TOKENIZERS,
        result=result,
        error=error,
        export_error=export_error,
        form=form or {},
        corpus_id=corpus_id,
        split_warning=split_warning,
    )


@router.get("/transfer", response_class=HTMLResponse)
def transfer(
    request: Request,
    login: PageUser,
    db: SessionDep,
    corpus: int | None = None,
    imported: int | None = None,
) -> HTMLResponse:
    report = import_report(db, imported) if imported is not None and login.user.is_admin else None
    return _page(request, login, db, corpus_id=corpus, result=report)


@router.post("/transfer/import", response_class=HTMLResponse)
def transfer_import(
    request: Request,
    login: PageAdmin,
    db: SessionDep,
    upload: UploadFile = File(...),
    corpus_name: str = Form(""),
    new_corpus: str = Form(""),
    document_name: str = Form(""),
    kind: str = Form("text"),
    annotator: str = Form(""),
    tokenizer: str = Form("whitespace"),
    skip_duplicates: bool = Form(False),
) -> Response:
    # a plain def: FastAPI runs it in a worker thread, so reading and storing a big file
    # (seconds) never holds up the event loop
    form = {
        "corpus_name": corpus_name,
        "new_corpus": new_corpus,
        "document_name": document_name,
        "kind": kind,
        "annotator": annotator,
        "tokenizer": tokenizer,
        "skip_duplicates": skip_duplicates,
    }
    source = upload.filename or "upload"
    target = new_corpus.strip() or corpus_name.strip()
    try:
        if not target:
            raise BadInput("choose a corpus or type the name of a new one")
        result = import_handle(
            db,
            upload.file,
            source=source,
            corpus_name=target,
            document_name=document_name.strip() or None,
            kind=kind,
            tokenizer=tokenizer,
            annotator=annotator or None,
            skip_duplicates=skip_duplicates,
            user=login.user,
        )
    except ServiceError as err:
        return _page(
            request, login, db, status_code=err.status_code, error=str(err.detail), form=form
        )
    # post/redirect/get: a reload of the result page shows the report, it does not re-import
    return RedirectResponse(
        f"/transfer?corpus={result.corpus_id}&imported={result.event_id}#import", status_code=303
    )


@router.get("/transfer/export", response_model=None)
def transfer_export(
    request: Request,
    login: PageAdjudicator,
    db: SessionDep,
    corpus: int | None = None,
    document: str = "",
    strip: bool = False,
    split: str = "",
    seed: int = 0,
    by: str = "document",
    zip: bool = False,
    anyway: bool = False,
) -> Response:
    try:
        if corpus is None:
            raise BadInput("choose a corpus to export")
        spec = SplitSpec(parse_ratios(split), seed=seed, by=by) if split.strip() else None
        document_id = int(document) if document.strip() else None
        result = export_gold(
            db, corpus, document_id=document_id, function_tags=not strip, split=spec
        )
        if spec is not None and result.empty_parts and not anyway:
            query = {
                "corpus": corpus,
                "document": document,
                "strip": strip,
                "split": split,
                "seed": seed,
                "by": by,
                "zip": zip,
            }
            return _page(
                request,
                login,
                db,
                corpus_id=corpus,
                split_warning={
                    "message": result.empty_message,
                    "counts": result.counts,
                    "advice": [
                        (
                            a.describe(cli=False),
                            "/transfer/export?"
                            + urlencode({**query, "seed": a.spec.seed, "by": a.spec.by}),
                        )
                        for a in result.advice
                    ],
                    "anyway": "/transfer/export?" + urlencode({**query, "anyway": True}),
                },
            )
        record_export(
            db,
            corpus,
            result,
            user=login.user,
            document_id=document_id,
            split=spec,
            function_tags=not strip,
        )
    except ValueError:
        return _page(
            request,
            login,
            db,
            status_code=422,
            corpus_id=corpus,
            export_error=f"document {document!r} is not a document id",
        )
    except ServiceError as err:
        return _page(
            request,
            login,
            db,
            status_code=err.status_code,
            corpus_id=corpus,
            export_error=str(err.detail),
        )
    if spec is None and not zip:
        ((name, text),) = result.files.items()
        return Response(
            text.encode("utf-8"),
            media_type="text/plain; charset=utf-8",
            headers={
                "Content-Disposition": f'attachment; filename="{name}"',
                "X-Treewright-Trees": str(result.counts[name]),
            },
        )
    base = next(iter(result.files)).rsplit(".", 1)[0] if spec is None else None
    corpus_row = find_corpus(db, corpus)
    name = (base or f"{slug(corpus_row.name if corpus_row else 'corpus')}-split") + ".zip"
    return Response(
        result.zip_bytes(),
        media_type="application/zip",
        headers={"Content-Disposition": f'attachment; filename="{name}"'},
    )
