"""JSON API for corpora: list, detail, sentences, create, settings, remove, import, export,
assign, members. Reading needs a login; changes need an admin; exports and the member list
need an adjudicator."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, File, Form, Query, UploadFile
from pydantic import BaseModel, Field

from app.deps import ApiAdjudicator, ApiAdmin, ApiUser, SessionDep
from app.models import Corpus
from app.schemas.common import RequestModel, UtcDateTime
from app.services import corpora as svc
from app.services.assignment import assign_sentences
from app.services.exports import SplitSpec, export_gold, record_export
from app.services.staged_import import import_handle
from app.services.visibility import (
    add_member,
    members,
    readable,
    readable_corpus,
    remove_member,
)

router = APIRouter(tags=["corpora"])


class ErrorPublic(BaseModel):
    detail: Any


ERRORS: dict[int | str, dict[str, Any]] = {
    code: {"model": ErrorPublic} for code in (401, 403, 404, 409, 413, 422)
}


class CorpusSummaryPublic(BaseModel):
    id: int
    name: str
    description: str
    documents: int
    sentences: int
    states: dict[str, int]
    gold: int
    created_at: UtcDateTime


class DocumentPublic(BaseModel):
    id: int
    name: str
    position: int
    sentences: int
    states: dict[str, int]


class CorpusPublic(CorpusSummaryPublic):
    label_set: list[str]
    tag_set: list[str]
    settings: dict[str, Any]
    active_grammar_id: int | None
    document_list: list[DocumentPublic] = Field(
        description="one page of the corpus's documents in their order (``documents`` is "
        "how many there are in all)"
    )
    document_per_page: int
    document_next_cursor: str | None = Field(
        None,
        description="pass as ``after`` for the next page of documents; null on the last page",
    )


class CorpusCreate(RequestModel):
    name: str = Field(min_length=1, max_length=128)
    description: str = ""
    label_set: list[str] | None = None
    tag_set: list[str] | None = None
    settings: dict[str, Any] = Field(default_factory=dict)


class CorpusUpdate(RequestModel):
    description: str | None = None
    label_set: list[str] | None = None
    tag_set: list[str] | None = None
    settings: dict[str, Any] = Field(default_factory=dict)


class CorpusRemove(RequestModel):
    confirm_name: str


class RemovedPublic(BaseModel):
    removed: str


class SentencePublic(BaseModel):
    id: int
    document_id: int
    document: str
    position: int
    text: str
    tokens: list[str]
    state: str
    assigned_to: list[str]


class SentencePagePublic(BaseModel):
    page: int | None = Field(description="the offset page's number (null for a cursor page)")
    per_page: int
    total: int
    pages: int
    next_cursor: str | None = Field(
        None, description="pass as ``after`` for the next page; null on the last page"
    )
    sentences: list[SentencePublic]


class DuplicatePublic(BaseModel):
    line: int
    text: str
    same_as_line: int | None
    same_as_sentence_id: int | None
    same_as_document: str | None


class ImportPublic(BaseModel):
    corpus_id: int
    corpus_name: str
    document_id: int
    document_name: str
    kind: str
    imported: int
    attached: int
    skipped_duplicates: int
    empty_elements_dropped: int
    duplicates: list[DuplicatePublic]
    summary: str


class ExportPublic(BaseModel):
    files: dict[str, str]
    counts: dict[str, int]
    warnings: list[str]


class AssignCreate(RequestModel):
    per_sentence: int | None = Field(default=None, ge=1, le=10)
    usernames: list[str] | None = None


class AssignPublic(BaseModel):
    created: int
    sentences: int
    already_complete: int
    short: list[int]
    per_user: dict[str, int]


def _summary(row: svc.CorpusCounts) -> dict[str, Any]:
    c = row.corpus
    return {
        "id": c.id,
        "name": c.name,
        "description": c.description,
        "documents": row.documents,
        "sentences": row.sentences,
        "states": row.states,
        "gold": row.gold,
        "created_at": c.created_at,
    }


#: Documents on one page of a corpus's detail unless ``per_page`` says otherwise.
DOCUMENTS_PER_PAGE = 100


def _detail(
    db: SessionDep, corpus: Corpus, *, after: str | None = None, per_page: int = DOCUMENTS_PER_PAGE
) -> CorpusPublic:
    page = svc.document_page(db, corpus, per_page=per_page, after=after)
    docs = [
        DocumentPublic(
            id=d.document.id,
            name=d.document.name,
            position=d.document.position,
            sentences=d.sentences,
            states=d.states,
        )
        for d in page.rows
    ]
    return CorpusPublic(
        **_summary(svc.corpus_counts(db, corpus)),
        label_set=list(corpus.label_set or []),
        tag_set=list(corpus.tag_set or []),
        settings=svc.effective_settings(corpus),
        active_grammar_id=corpus.active_grammar_id,
        document_list=docs,
        document_per_page=page.per_page,
        document_next_cursor=page.next_cursor,
    )


@router.get("/api/corpora", response_model=list[CorpusSummaryPublic], responses=ERRORS)
def list_corpora(login: ApiUser, db: SessionDep) -> list[CorpusSummaryPublic]:
    return [
        CorpusSummaryPublic(**_summary(row))
        for row in readable(db, login.user, svc.corpus_overview(db))
    ]


@router.post("/api/corpora", response_model=CorpusPublic, status_code=201, responses=ERRORS)
def create_corpus(body: CorpusCreate, login: ApiAdmin, db: SessionDep) -> CorpusPublic:
    corpus = svc.create_corpus(
        db,
        body.name,
        description=body.description,
        label_set=body.label_set,
        tag_set=body.tag_set,
        settings=body.settings,
        user=login.user,
    )
    return _detail(db, corpus)


@router.get("/api/corpora/{corpus_id}", response_model=CorpusPublic, responses=ERRORS)
def corpus_detail(
    corpus_id: int,
    login: ApiUser,
    db: SessionDep,
    after: str | None = Query(
        None, max_length=64, description="a document cursor: the page after it"
    ),
    per_page: int = Query(
        DOCUMENTS_PER_PAGE, ge=1, le=svc.DOCUMENTS_PER_PAGE_MAX, description="documents per page"
    ),
) -> CorpusPublic:
    """The corpus with its counts and one page of its documents (keyset: a page costs the
    same wherever it is)."""
    return _detail(db, readable_corpus(db, corpus_id, login.user), after=after, per_page=per_page)


@router.patch("/api/corpora/{corpus_id}", response_model=CorpusPublic, responses=ERRORS)
def update_corpus(
    corpus_id: int, body: CorpusUpdate, login: ApiAdmin, db: SessionDep
) -> CorpusPublic:
    corpus = svc.get_corpus(db, corpus_id)
    svc.update_corpus(
        db,
        corpus,
        settings=body.settings,
        description=body.description,
        label_set=body.label_set,
        tag_set=body.tag_set,
        user=login.user,
    )
    return _detail(db, corpus)


@router.post("/api/corpora/{corpus_id}/remove", response_model=RemovedPublic, responses=ERRORS)
def remove_corpus(
    corpus_id: int, body: CorpusRemove, login: ApiAdmin, db: SessionDep
) -> RemovedPublic:
    """Remove the corpus and everything in it; ``confirm_name`` must be its exact name."""
    name = svc.delete_corpus(db, corpus_id, body.confirm_name, user=login.user)
    return RemovedPublic(removed=name)


class MemberPublic(BaseModel):
    user_id: int
    username: str
    display_name: str
    role: str
    explicit: bool = Field(description="on the member list an admin keeps")
    added_at: UtcDateTime | None
    assigned: int = Field(description="sentences of the corpus assigned to them")


class MembersPublic(BaseModel):
    corpus_id: int
    members: list[MemberPublic]
    changed: bool = Field(False, description="whether the call changed the list")
    still_assigned: int = Field(
        0, description="after a removal: sentences still assigned to them (they read it still)"
    )


class MemberChange(RequestModel):
    username: str = Field(min_length=1, max_length=64)


def _members(db: Any, corpus: Corpus, **extra: Any) -> MembersPublic:
    return MembersPublic(
        corpus_id=corpus.id,
        members=[MemberPublic(**vars(m)) for m in members(db, corpus)],
        **extra,
    )


@router.get("/api/corpora/{corpus_id}/members", response_model=MembersPublic, responses=ERRORS)
def corpus_members(corpus_id: int, login: ApiAdjudicator, db: SessionDep) -> MembersPublic:
    """Who reads the corpus as a member: the explicit list and those with work assigned."""
    return _members(db, readable_corpus(db, corpus_id, login.user))


@router.post("/api/corpora/{corpus_id}/members", response_model=MembersPublic, responses=ERRORS)
def corpus_member_add(
    corpus_id: int, body: MemberChange, login: ApiAdmin, db: SessionDep
) -> MembersPublic:
    """Add a user to the corpus's member list (nothing changes if they are on it)."""
    corpus = svc.get_corpus(db, corpus_id)
    changed = add_member(db, corpus, body.username, by=login.user)
    return _members(db, corpus, changed=changed)


@router.post(
    "/api/corpora/{corpus_id}/members/remove", response_model=MembersPublic, responses=ERRORS
)
def corpus_member_remove(
    corpus_id: int, body: MemberChange, login: ApiAdmin, db: SessionDep
) -> MembersPublic:
    """Take a user off the member list (someone with work assigned still reads the corpus)."""
    corpus = svc.get_corpus(db, corpus_id)
    left = remove_member(db, corpus, body.username, by=login.user)
    return _members(db, corpus, changed=True, still_assigned=left)


@router.get(
    "/api/corpora/{corpus_id}/sentences", response_model=SentencePagePublic, responses=ERRORS
)
def corpus_sentences(
    corpus_id: int,
    login: ApiUser,
    db: SessionDep,
    page: int | None = Query(None, ge=1, le=1_000_000),
    after: str | None = Query(None, max_length=40),
    per_page: int = Query(50, ge=1, le=500),
    state: str | None = None,
    document_id: int | None = None,
) -> SentencePagePublic:
    """Sentences in reading order, one page at a time: follow ``next_cursor`` with ``after``
    (each page costs the same wherever it is), or ask for an offset ``page`` number (costs
    grow with the offset)."""
    corpus = readable_corpus(db, corpus_id, login.user)
    listing = svc.sentence_page(
        db, corpus, page=page, after=after, per_page=per_page, state=state, document_id=document_id
    )
    return SentencePagePublic(
        page=listing.page,
        per_page=listing.per_page,
        total=listing.total,
        pages=listing.pages,
        next_cursor=listing.next_cursor,
        sentences=[
            SentencePublic(
                id=r.sentence.id,
                document_id=r.sentence.document_id,
                document=r.document_name,
                position=r.sentence.position,
                text=r.sentence.text,
                tokens=list(r.sentence.tokens),
                state=r.sentence.state,
                assigned_to=r.assignees,
            )
            for r in listing.rows
        ],
    )


@router.post("/api/corpora/import", response_model=ImportPublic, status_code=201, responses=ERRORS)
def import_file(
    login: ApiAdmin,
    db: SessionDep,
    upload: UploadFile = File(...),
    corpus_name: str = Form(..., min_length=1, max_length=128),
    document_name: str | None = Form(None),
    kind: str = Form("text"),
    tokenizer: str = Form("whitespace"),
    annotator: str | None = Form(None),
    skip_duplicates: bool = Form(False),
) -> ImportPublic:
    """Import one file (all or nothing); the corpus is made when it does not exist."""
    # A plain def: FastAPI runs it in a worker thread, so reading and storing a big file
    # (seconds) never holds up the event loop.
    # Every kind is read line by line and staged in short transactions (saves go on
    # meanwhile); the import still appears whole or not at all.
    result = import_handle(
        db,
        upload.file,
        source=upload.filename or "upload",
        corpus_name=corpus_name,
        document_name=document_name or None,
        kind=kind,
        tokenizer=tokenizer,
        annotator=annotator or None,
        skip_duplicates=skip_duplicates,
        user=login.user,
    )
    return ImportPublic(
        corpus_id=result.corpus_id,
        corpus_name=result.corpus_name,
        document_id=result.document_id,
        document_name=result.document_name,
        kind=result.kind,
        imported=result.imported,
        attached=result.attached,
        skipped_duplicates=result.skipped_duplicates,
        empty_elements_dropped=result.empty_elements_dropped,
        duplicates=[DuplicatePublic(**d.__dict__) for d in result.duplicates],
        summary=result.summary(),
    )


@router.get("/api/corpora/{corpus_id}/export", response_model=ExportPublic, responses=ERRORS)
def export(
    corpus_id: int,
    login: ApiAdjudicator,
    db: SessionDep,
    document_id: int | None = None,
    function_tags: bool = True,
    train: float | None = Query(None, ge=0, allow_inf_nan=False),
    dev: float | None = Query(None, ge=0, allow_inf_nan=False),
    test: float | None = Query(None, ge=0, allow_inf_nan=False),
    seed: int = 0,
    by: str = Query("document", pattern="^(document|sentence)$"),
) -> ExportPublic:
    """Gold as bracketed text; give train/dev/test ratios for a deterministic split."""
    split = None
    if train is not None or dev is not None or test is not None:
        split = SplitSpec((train or 0.0, dev or 0.0, test or 0.0), seed=seed, by=by)
    result = export_gold(
        db, corpus_id, document_id=document_id, function_tags=function_tags, split=split
    )
    record_export(
        db,
        corpus_id,
        result,
        user=login.user,
        document_id=document_id,
        split=split,
        function_tags=function_tags,
    )
    return ExportPublic(files=result.files, counts=result.counts, warnings=result.warnings)


@router.post("/api/corpora/{corpus_id}/assign", response_model=AssignPublic, responses=ERRORS)
def assign(corpus_id: int, body: AssignCreate, login: ApiAdmin, db: SessionDep) -> AssignPublic:
    """Give every open sentence its annotators (idempotent)."""
    result = assign_sentences(
        db, corpus_id, per_sentence=body.per_sentence, usernames=body.usernames, by=login.user
    )
    return AssignPublic(
        created=result.created,
        sentences=result.sentences,
        already_complete=result.already_complete,
        short=result.short,
        per_user=result.per_user,
    )
