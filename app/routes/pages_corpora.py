"""Corpora pages: the list of corpora (``/``) and one corpus (``/corpora/{id}``).

Everyone logged in sees the counts and the sentence list; admins also create corpora, assign
sentences, change settings and remove a corpus (typing its name). Forms post back here; a
successful change redirects to the page with a short ``done`` code, a refused one shows the
page again with the reason.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.deps import Login, PageAdmin, PageUser, PostedForm, SessionDep
from app.models import SENTENCE_STATES, Corpus, Sentence
from app.services import corpora as svc
from app.services.assignment import assign_sentences, assigned_to
from app.services.errors import BadInput, ServiceError
from app.services.visibility import (
    add_member,
    members,
    readable,
    readable_corpus,
    remove_member,
)
from app.web import render
from app.wording import plural

router = APIRouter(tags=["pages"], include_in_schema=False)

PER_PAGE = 50
#: Documents a page of the corpus page lists (a corpus may have thousands).
DOCUMENTS_PER_PAGE = 50

DONE_MESSAGES = {
    "created": "The corpus was created. Import sentences or trees on the Transfer page.",
    "settings": "The settings were saved.",
    "member_added": "The member list was updated.",
    "member_removed": "The member list was updated.",
}


def _corpus_page(
    request: Request,
    login: Login,
    db: SessionDep,
    corpus: Corpus,
    *,
    after: str | None = None,
    before: str | None = None,
    last: bool = False,
    state: str | None = None,
    document: int | None = None,
    docs_after: str | None = None,
    docs_before: str | None = None,
    error: str | None = None,
    notice: str | None = None,
    form: dict[str, Any] | None = None,
    status_code: int = 200,
) -> HTMLResponse:
    if state not in SENTENCE_STATES:
        state = None
    try:
        listing = svc.sentence_page(
            db,
            corpus,
            per_page=PER_PAGE,
            state=state,
            document_id=document,
            after=after,
            before=before,
            last=last,
        )
    except BadInput as err:  # a mangled cursor: say so above the first page
        error = error or str(err.detail)
        status_code = 422
        listing = svc.sentence_page(
            db, corpus, per_page=PER_PAGE, state=state, document_id=document
        )
    try:
        documents = svc.document_page(
            db, corpus, per_page=DOCUMENTS_PER_PAGE, after=docs_after, before=docs_before
        )
    except BadInput as err:  # a mangled cursor: the first page of documents
        error = error or str(err.detail)
        status_code = 422
        documents = svc.document_page(db, corpus, per_page=DOCUMENTS_PER_PAGE)
    chosen = None
    if document is not None and all(r.document.id != document for r in documents.rows):
        chosen = svc.find_document(db, corpus, document)
    ids = [row.sentence.id for row in listing.rows]
    mine = assigned_to(db, login.user, ids)
    return render(
        request,
        "corpus.html",
        login,
        status_code=status_code,
        nav="corpora",
        corpus=corpus,
        counts=svc.corpus_counts(db, corpus),
        documents=documents,
        chosen_document=chosen,
        listing=listing,
        mine=mine,
        state=state,
        document=document,
        states=SENTENCE_STATES,
        settings=svc.effective_settings(corpus),
        members=members(db, corpus) if login.user.can_adjudicate else [],
        specs=svc.SETTING_SPECS,
        policies=svc.LABEL_POLICIES,
        own_policies=svc.SETTLE_OWN_POLICIES,
        error=error,
        notice=notice,
        form=form or {},
        link=lambda sentence: sentence_link(sentence, mine, login),
    )


@router.get("/", response_class=HTMLResponse)
def corpora_index(request: Request, login: PageUser, db: SessionDep) -> HTMLResponse:
    return render(
        request,
        "corpora.html",
        login,
        nav="corpora",
        rows=readable(db, login.user, svc.corpus_overview(db)),
        states=SENTENCE_STATES,
        error=None,
        form={},
    )


@router.post("/corpora", response_class=HTMLResponse)
def corpora_create(
    request: Request,
    login: PageAdmin,
    db: SessionDep,
    name: str = Form(""),
    description: str = Form(""),
    label_set: str = Form(""),
    tag_set: str = Form(""),
    ptb_sets: bool = Form(False),
) -> Response:
    labels = svc.parse_inventory(label_set) or (list(svc.PTB_LABELS) if ptb_sets else None)
    tags = svc.parse_inventory(tag_set) or (list(svc.PTB_TAGS) if ptb_sets else None)
    try:
        corpus = svc.create_corpus(
            db, name, description=description, label_set=labels, tag_set=tags, user=login.user
        )
    except ServiceError as err:
        return render(
            request,
            "corpora.html",
            login,
            status_code=err.status_code,
            nav="corpora",
            rows=readable(db, login.user, svc.corpus_overview(db)),
            states=SENTENCE_STATES,
            error=str(err.detail),
            form={
                "name": name,
                "description": description,
                "label_set": label_set,
                "tag_set": tag_set,
            },
        )
    return RedirectResponse(f"/corpora/{corpus.id}?done=created", status_code=303)


@router.get("/corpora/{corpus_id}", response_class=HTMLResponse)
def corpus_view(
    request: Request,
    corpus_id: int,
    login: PageUser,
    db: SessionDep,
    after: str | None = None,
    before: str | None = None,
    last: bool = False,
    state: str | None = None,
    document: int | None = None,
    done: str | None = None,
    assigned: int | None = None,
    docs_after: str | None = None,
    docs_before: str | None = None,
) -> HTMLResponse:
    corpus = readable_corpus(db, corpus_id, login.user)
    notice = DONE_MESSAGES.get(done or "")
    if done == "assigned" and assigned is not None:
        notice = f"{plural(assigned, 'assignment')} made."
    return _corpus_page(
        request,
        login,
        db,
        corpus,
        after=after or None,
        before=before or None,
        last=last,
        state=state or None,
        document=document,
        docs_after=docs_after or None,
        docs_before=docs_before or None,
        notice=notice,
    )


@router.post("/corpora/{corpus_id}/assign", response_class=HTMLResponse)
def corpus_assign(
    request: Request, corpus_id: int, login: PageAdmin, db: SessionDep, per_sentence: str = Form("")
) -> Response:
    corpus = svc.get_corpus(db, corpus_id)
    try:
        wanted = int(per_sentence) if per_sentence.strip() else None
    except ValueError:
        return _corpus_page(
            request,
            login,
            db,
            corpus,
            status_code=422,
            error=f"annotators per sentence: {per_sentence!r} is not a number",
        )
    try:
        result = assign_sentences(db, corpus.id, per_sentence=wanted, by=login.user)
    except ServiceError as err:
        return _corpus_page(
            request, login, db, corpus, status_code=err.status_code, error=str(err.detail)
        )
    if result.short:
        return _corpus_page(request, login, db, corpus, notice=result.summary())
    return RedirectResponse(
        f"/corpora/{corpus.id}?done=assigned&assigned={result.created}", status_code=303
    )


@router.post("/corpora/{corpus_id}/settings", response_class=HTMLResponse)
def corpus_settings(
    request: Request, corpus_id: int, login: PageAdmin, db: SessionDep, form: PostedForm
) -> Response:
    corpus = svc.get_corpus(db, corpus_id)
    values: dict[str, Any] = {}
    for key, spec in svc.SETTING_SPECS.items():
        if spec.kind is bool:
            values[key] = form.get(key) == "on"
        elif key in form:
            values[key] = form.get(key)
    label_text = str(form.get("label_set", ""))
    tag_text = str(form.get("tag_set", ""))
    try:
        svc.update_corpus(
            db,
            corpus,
            settings=values,
            description=str(form.get("description", "")),
            label_set=_changed(label_text, corpus.label_set),
            tag_set=_changed(tag_text, corpus.tag_set),
            user=login.user,
        )
    except ServiceError as err:
        return _corpus_page(
            request, login, db, corpus, status_code=err.status_code, error=str(err.detail)
        )
    return RedirectResponse(f"/corpora/{corpus.id}?done=settings", status_code=303)


@router.post("/corpora/{corpus_id}/members", response_class=HTMLResponse)
def corpus_member_add(
    request: Request, corpus_id: int, login: PageAdmin, db: SessionDep, username: str = Form("")
) -> Response:
    return _member_change(request, login, db, corpus_id, username, remove=False)


@router.post("/corpora/{corpus_id}/members/remove", response_class=HTMLResponse)
def corpus_member_remove(
    request: Request, corpus_id: int, login: PageAdmin, db: SessionDep, username: str = Form("")
) -> Response:
    return _member_change(request, login, db, corpus_id, username, remove=True)


def _member_change(
    request: Request, login: Login, db: SessionDep, corpus_id: int, username: str, *, remove: bool
) -> Response:
    corpus = svc.get_corpus(db, corpus_id)
    left = 0
    try:
        if remove:
            left = remove_member(db, corpus, username, by=login.user)
        else:
            add_member(db, corpus, username, by=login.user)
    except ServiceError as err:
        return _corpus_page(
            request, login, db, corpus, status_code=err.status_code, error=str(err.detail)
        )
    if left:  # say why they still read the corpus
        notice = (
            f"{username.strip()} is off the member list, but still reads this corpus while "
            f"{plural(left, 'sentence')} of it {'is' if left == 1 else 'are'} assigned to them."
        )
        return _corpus_page(request, login, db, corpus, notice=notice)
    done = "member_removed" if remove else "member_added"
    return RedirectResponse(f"/corpora/{corpus.id}?done={done}#members", status_code=303)


@router.post("/corpora/{corpus_id}/remove", response_class=HTMLResponse)
def corpus_remove(
    request: Request, corpus_id: int, login: PageAdmin, db: SessionDep, confirm_name: str = Form("")
) -> Response:
    corpus = svc.get_corpus(db, corpus_id)
    try:
        svc.delete_corpus(db, corpus.id, confirm_name, user=login.user)
    except ServiceError as err:
        return _corpus_page(
            request,
            login,
            db,
            corpus,
            status_code=err.status_code,
            error=str(err.detail),
            form={"confirm_name": confirm_name},
        )
    return RedirectResponse("/", status_code=303)


def _changed(text: str, current: list[Any] | None) -> list[str] | None:
    """The typed inventory when it differs from the stored one, else None (leave it)."""
    items = svc.parse_inventory(text)
    if items == list(current or []):
        return None
    return items


def sentence_link(sentence: Sentence, mine: set[int], login: Login) -> str | None:
    """Where a sentence row links to for this user, if anywhere."""
    if sentence.id in mine and sentence.state in ("queued", "in_progress"):
        return f"/bench/{sentence.id}"
    if login.user.can_adjudicate and sentence.state in ("in_review", "gold"):
        return f"/review/{sentence.id}"
    if login.user.can_adjudicate and sentence.state in ("held_back", "dropped"):
        return f"/review?corpus={sentence.corpus_id}#held"
    return None
