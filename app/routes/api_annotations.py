"""The Bench's JSON API: open a sentence, save revisions, submit, notes, re-parse; the Queue.

Every route acts on the caller's own annotation of a sentence assigned to them; anything else
is 404 (see :mod:`app.services.annotation`). Errors: 422 with ``kind`` (brackets, words, labels,
pins, shape, state), 409 with the current revision for a stale save.
"""

from __future__ import annotations

import logging
import math
from typing import Any

from fastapi import APIRouter, BackgroundTasks, Query, Request
from sqlalchemy.orm import Session

from app.deps import ApiUser, SessionDep
from app.models import (
    ANN_DRAFT,
    ANN_SUBMITTED,
    SENT_GOLD,
    SENT_IN_REVIEW,
    Annotation,
    Corpus,
    Sentence,
    Suggestion,
    User,
)
from app.schemas.annotation import (
    AlternativePublic,
    AnnotationPublic,
    BenchErrorPublic,
    BenchPublic,
    ChangesPublic,
    NoteUpdate,
    ParsePlacePublic,
    Pins,
    QueuePublic,
    ReparsePublic,
    ReparseRequest,
    RevisionCreate,
    RevisionPublic,
    SavePublic,
    SentencePublic,
    SubmitRequest,
    SuggestionPublic,
    TokenChangeRequest,
    TokenFixPublic,
    TokenFixRequest,
)
from app.services import annotation as svc
from app.services import refresh, suggestions, tokens, training
from app.services.admission import ParserBusy
from app.services.corpora import get_corpus
from parser.trees import write_tree

log = logging.getLogger(__name__)


router = APIRouter(tags=["bench"])

ERRORS: dict[int | str, dict[str, Any]] = {
    404: {"model": BenchErrorPublic, "description": "not in your queue"},
    409: {"model": BenchErrorPublic, "description": "stale save: carries the current revision"},
    422: {"model": BenchErrorPublic, "description": "refused tree, pins or body"},
}


def _annotation_public(a: Annotation | None, db: Session | None = None) -> AnnotationPublic:
    if a is None:
        return AnnotationPublic(id=None, state=ANN_DRAFT, head=0)
    number = training.version_number(db, a.start_grammar_version_id) if db is not None else None
    return AnnotationPublic(
        id=a.id,
        state=a.state,
        head=a.head,
        comment=a.comment or "",
        flag=a.flag,
        submitted_at=a.submitted_at,
        start_kind=a.start_kind,
        start_grammar_version=number,
    )


def _corpus(db: Session, corpus_id: int) -> Corpus:
    return get_corpus(db, corpus_id)


@router.get("/api/bench/{sentence_id}", response_model=BenchPublic, responses=ERRORS)
def open_bench(sentence_id: int, login: ApiUser, db: SessionDep, request: Request) -> BenchPublic:
    """Everything the Bench shows for one sentence: your newest revision (or the start tree),
    the grammar's suggestion with span posteriors, the label sets, your place in the queue."""
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    return bench_payload(db, login.user, sentence, request.app.state.settings.suggestion_k)


@router.get("/api/bench/{sentence_id}/place", response_model=ParsePlacePublic, responses=ERRORS)
def parse_place(
    sentence_id: int, login: ApiUser, db: SessionDep, request: Request
) -> ParsePlacePublic:
    """Whether the parses opening this sentence needs are done, else its place in the parse
    pool's line. Never waits: it asks the pool for the answer and reads the line (the Bench's
    waiting page asks every second until ``ready``). Asking starts the parse if nobody has."""
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    try:
        _opening_parses(db, login.user, sentence, request.app.state.settings.suggestion_k, 0.0)
    except ParserBusy as busy:
        return ParsePlacePublic(ready=False, ahead=int(busy.extra.get("ahead", 0)))
    return ParsePlacePublic(ready=True)


def _opening_parses(db: Session, user: User, sentence: Sentence, k: int, wait: float) -> None:
    """The parses :func:`bench_payload` asks for, in its order, waiting at most ``wait``
    seconds for each (ParserBusy if one is not done by then)."""
    corpus = _corpus(db, sentence.corpus_id)
    if svc.current_revision(db, svc.own_annotation(db, user, sentence)) is None:
        suggestions.fixed_start(db, sentence, corpus, k, wait=wait)
    suggestions.suggestion_for(db, sentence, corpus, k, complete=False, wait=wait)


def bench_payload(
    db: Session, user: User, sentence: Sentence, k: int, wait: float | None = None
) -> BenchPublic:
    """The Bench's data for ``user``'s own annotation of ``sentence`` (assigned to them);
    the page embeds it so the first drawing needs no second request. ``wait`` bounds the
    wait for each parse it needs (default the pool's); past it, ParserBusy with the place."""
    corpus = _corpus(db, sentence.corpus_id)
    annotation = svc.own_annotation(db, user, sentence)
    head = svc.current_revision(db, annotation)
    carried_from = None
    if head is not None and head.token_version != sentence.token_version:
        carried_from = head.token_version
        tree = tokens.carry_through(db, sentence, head.tree, head.token_version)
        pins, source = {}, "tokens"
        note = (
            "Your tree was made on earlier tokens; the words were fixed since. It is "
            "carried over (a split word's tag on each piece, joined words with the left "
            "tag) and saved as a new revision; your earlier revisions are kept."
        )
    elif head is not None:
        tree, pins, source, note = head.tree, head.pins or {}, head.source, None
    else:  # before the suggestion below: a first opening parses completely once, not twice
        start = suggestions.fixed_start(db, sentence, corpus, k, wait=wait)
        tree, pins, source, note = start.tree, {}, start.source, start.note
    suggestion = suggestions.suggestion_for(db, sentence, corpus, k, complete=False, wait=wait)
    if head is None and suggestion is None and training.open_job(db, corpus.id) is not None:
        note = (
            "The grammar is being trained: suggestions arrive when the grammar is "
            "ready (open this sentence again then). Meanwhile this is a flat tree."
        )
    start_number = training.version_number(db, sentence.start_grammar_version_id)
    place = svc.queue_place(db, user, sentence.id)
    sugg_public = _suggestion_public(db, corpus, suggestion)
    editable = (annotation is None or annotation.state != ANN_SUBMITTED) and sentence.state not in (
        SENT_IN_REVIEW,
        SENT_GOLD,
    )
    return BenchPublic(
        sentence=SentencePublic(
            id=sentence.id,
            corpus_id=corpus.id,
            corpus_name=corpus.name,
            document_name=sentence.document.name,
            position=sentence.position,
            tokens=svc.stored_words(sentence),
            text=sentence.text,
            state=sentence.state,
        ),
        annotation=_annotation_public(annotation, db),
        tree=tree,
        pins=Pins(**pins),
        source=source,
        start_note=note,
        editable=editable,
        suggestion=sugg_public,
        start_kind=sentence.start_kind,
        start_grammar_version=start_number,
        labels=sorted(corpus.label_set or []),
        tags=sorted(corpus.tag_set or []),
        unknown_label_policy=corpus.options.unknown_label_policy.value,
        queue=place,
        unseen_words=suggestions.unseen_words(db, sentence, corpus),
        carried_from=carried_from,
        token_version=sentence.token_version,
        split_offered=suggestions.too_long(svc.stored_words(sentence)),
    )


def _suggestion_public(
    db: Session, corpus: Corpus, row: Suggestion | None
) -> SuggestionPublic | None:
    if row is None:
        return None
    # the row's own version, and whether it is still the active one: a row of an older
    # version is never passed off as the active grammar's
    number = training.version_number(db, row.grammar_version_id)
    return SuggestionPublic(
        grammar_version=number or 0,
        stale=row.grammar_version_id != corpus.active_grammar_id,
        alternatives=[
            AlternativePublic(tree=t, probability=_prob(lp))
            for t, lp in zip(row.trees, row.logprobs, strict=False)
        ],
        posteriors=[tuple(p) for p in row.posteriors],
        consensus=row.consensus,
        fallback=row.fallback,
        seconds=row.seconds,
        complete=suggestions.is_complete(row),
    )


@router.get(
    "/api/bench/{sentence_id}/suggestion", response_model=SuggestionPublic | None, responses=ERRORS
)
def full_suggestion(
    sentence_id: int, login: ApiUser, db: SessionDep, request: Request
) -> SuggestionPublic | None:
    """The grammar's suggestion with span posteriors and probabilities, computed now if the
    Bench page was drawn from the fast one (null without an active grammar)."""
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    corpus = _corpus(db, sentence.corpus_id)
    row = suggestions.suggestion_for(
        db, sentence, corpus, request.app.state.settings.suggestion_k, complete=True
    )
    return _suggestion_public(db, corpus, row)


def _prob(logprob: float | None) -> float | None:
    return None if logprob is None else round(math.exp(logprob), 6)


@router.post(
    "/api/bench/{sentence_id}/revisions",
    response_model=SavePublic,
    status_code=201,
    responses=ERRORS,
)
def save_revision(
    sentence_id: int, body: RevisionCreate, login: ApiUser, db: SessionDep
) -> SavePublic:
    """Append a revision. ``base`` must be your current head, else 409 with the current
    revision (nothing is written)."""
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    result = svc.save_revision(
        db,
        login.user,
        sentence,
        base=body.base,
        tree_text=body.tree,
        pins=body.pins.model_dump(),
        source=body.source,
        confirm_labels=body.confirm_labels,
        active_seconds=body.active_seconds,
        actions=body.actions,
        start_tree=body.start,
    )
    rev = result.revision
    return SavePublic(
        annotation=_annotation_public(result.annotation, db),
        revision=RevisionPublic(
            number=rev.number,
            tree=rev.tree,
            pins=Pins(**(rev.pins or {})),
            source=rev.source,
            created_at=rev.created_at,
        ),
    )


@router.post("/api/bench/{sentence_id}/submit", response_model=AnnotationPublic, responses=ERRORS)
def submit(
    sentence_id: int,
    body: SubmitRequest,
    login: ApiUser,
    db: SessionDep,
    request: Request,
    background: BackgroundTasks,
) -> AnnotationPublic:
    """Mark your annotation submitted; ``base`` must be your current head. After the
    response, the next sentences of your queue are parsed under the active grammar if they
    lack its suggestion (app.services.refresh.refresh_after_hand_in): by a worker when the
    server hands its jobs to ``treewright worker`` processes, otherwise in this process."""
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    done = _annotation_public(svc.submit(db, login.user, sentence, base=body.base))
    k = request.app.state.settings.suggestion_k
    if not training.defer_refresh(request.app.state, sentence.corpus_id, login.user.id, k):
        background.add_task(
            refresh.refresh_after_hand_in,
            request.app.state.sessionmaker,
            sentence.corpus_id,
            login.user.id,
            k=k,
        )
    return done


@router.patch("/api/bench/{sentence_id}/note", response_model=AnnotationPublic, responses=ERRORS)
def set_note(
    sentence_id: int, body: NoteUpdate, login: ApiUser, db: SessionDep
) -> AnnotationPublic:
    """Set your comment, hold the sentence back with a reason (``flag``), or release it."""
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    return _annotation_public(
        svc.set_note(
            db,
            login.user,
            sentence,
            comment=body.comment,
            flag=body.flag,
            clear_flag=body.clear_flag,
        )
    )


@router.post("/api/bench/{sentence_id}/reparse", response_model=ReparsePublic, responses=ERRORS)
def reparse(
    sentence_id: int, body: ReparseRequest, login: ApiUser, db: SessionDep
) -> ReparsePublic:
    """Re-parse around everything you said (pins, edited and removed brackets, corrected tags):
    the consensus tree under those constraints first, then the k best readings; whether it is
    plausible, and what it would change in the tree sent. Nothing is saved."""
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    corpus = _corpus(db, sentence.corpus_id)
    out = suggestions.reparse(
        db, sentence, corpus, body.pins.model_dump(), k=body.k, tree_text=body.tree
    )
    o = out.outcome
    proposal = write_tree(o.tree)
    readings = [
        AlternativePublic(tree=write_tree(t), probability=None if p is None else round(p, 6))
        for t, p in o.readings
    ]
    trees = [proposal] + [r.tree for r in readings if r.tree != proposal]
    d = out.changes
    return ReparsePublic(
        trees=trees,
        readings=readings,
        plausible=o.plausible,
        reasons=o.reasons,
        summary=out.summary,
        stand_ins=o.stand_ins,
        fallback=o.fallback,
        seconds=o.seconds,
        posteriors=[(lab, a, b, round(p, 4)) for lab, a, b, p in o.posteriors],
        tag_posteriors=[{t: round(p, 4) for t, p in d.items()} for d in o.tag_posteriors],
        grammar_version=out.grammar_version,
        changes=None
        if d is None
        else ChangesPublic(
            added=d.added,
            removed=d.removed,
            relabelled=d.relabelled,
            retagged=d.retagged,
            count=d.count,
        ),
    )


@router.post(
    "/api/bench/{sentence_id}/tokens",
    response_model=TokenFixPublic,
    status_code=201,
    responses=ERRORS,
)
def fix_tokens(
    sentence_id: int, body: TokenFixRequest, login: ApiUser, db: SessionDep
) -> TokenFixPublic:
    """Split a token, join two neighbours or respell one: the sentence's tokens become a new
    version (the old ones are kept) and your tree is carried over as a new revision."""
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    out = tokens.fix_tokens(
        db,
        login.user,
        sentence,
        base=body.base,
        change=tokens.TokenChange(body.position, body.count, tuple(body.tokens)),
        active_seconds=body.active_seconds,
        actions=body.actions,
    )
    r = out.revision
    inv = out.inverse
    return TokenFixPublic(
        annotation=_annotation_public(out.annotation),
        revision=RevisionPublic(
            number=r.number,
            tree=r.tree,
            pins=Pins(**(r.pins or {})),
            source=r.source,
            created_at=r.created_at,
        ),
        tokens=[str(t) for t in sentence.tokens],
        token_version=sentence.token_version,
        undo=TokenChangeRequest(
            base=r.number,
            position=inv.position,
            count=2 if inv.count == 2 else 1,
            tokens=list(inv.tokens),
        ),
    )


@router.get(
    "/api/bench/{sentence_id}/revisions", response_model=list[RevisionPublic], responses=ERRORS
)
def my_revisions(sentence_id: int, login: ApiUser, db: SessionDep) -> list[RevisionPublic]:
    """Every saved revision of your annotation of this sentence, newest first (restoring one
    saves it again as a new revision with source ``restore``)."""
    sentence = svc.assigned_sentence(db, login.user, sentence_id)
    return [
        RevisionPublic(
            number=r.number,
            tree=r.tree,
            pins=Pins(**(r.pins or {})),
            source=r.source,
            created_at=r.created_at,
        )
        for r in svc.own_revisions(db, login.user, sentence)
    ]


@router.get("/api/queue", response_model=QueuePublic, responses={422: ERRORS[422]})
def my_queue(
    login: ApiUser,
    db: SessionDep,
    corpus_id: int | None = None,
    after: str | None = Query(None, max_length=60),
    limit: int = Query(200, ge=1, le=1000),
) -> QueuePublic:
    """Your assigned sentences in queue order, ``limit`` at a time, with your progress: pass
    ``next_cursor`` back as ``after`` for the next page."""
    page = svc.queue_page(db, login.user, corpus_id, after=after, limit=limit)
    return QueuePublic(
        total=page.total,
        submitted=page.submitted,
        first_index=page.first_index,
        next_cursor=page.next_cursor,
        items=page.items,
    )
