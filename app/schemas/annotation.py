"""Pydantic shapes of the Bench's JSON API (``/api/bench/...``) and the Queue (``/api/queue``).

Pins: ``spans`` lists ``[start, end, label]`` (0-based words, end exclusive) of pinned
constituents; ``tags`` lists ``[word index, tag]`` of pinned POS tags.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, Field

from app.models import ACTION_KINDS
from app.schemas.common import RequestModel, UtcDateTime
from app.services.annotation import QueueItem, QueuePlace

RevisionSource = Literal[
    "suggestion", "edit", "reparse", "alternative", "text", "import", "flat", "restore", "tokens"
]
MAX_PINS = 2_000


class Pins(RequestModel):
    spans: list[tuple[int, int, str]] = Field(default_factory=list, max_length=MAX_PINS)
    tags: list[tuple[int, str]] = Field(default_factory=list, max_length=MAX_PINS)
    edited_spans: list[tuple[int, int, str]] = Field(
        default_factory=list,
        max_length=MAX_PINS,
        description="[start, end, label] of brackets the annotator added or relabelled: kept "
        "by a re-parse like pins, without being pinned",
    )
    edited_tags: list[tuple[int, str]] = Field(
        default_factory=list,
        max_length=MAX_PINS,
        description="[word index, tag] of tags the annotator corrected: fixed for a re-parse",
    )
    removed_spans: list[tuple[int, int]] = Field(
        default_factory=list,
        max_length=MAX_PINS,
        description="[start, end] of brackets the annotator removed: a re-parse never puts a "
        "bracket there",
    )


class SentencePublic(BaseModel):
    id: int
    corpus_id: int
    corpus_name: str
    document_name: str
    position: int
    tokens: list[str]
    text: str
    state: str


class AnnotationPublic(BaseModel):
    id: int | None = Field(description="None until the first save or note")
    state: str = Field(description="draft, submitted or flagged")
    head: int = Field(description="number of the newest revision (0: nothing saved yet)")
    comment: str = ""
    flag: str | None = None
    submitted_at: UtcDateTime | None = None
    start_kind: str | None = Field(
        default=None,
        description=(
            "what the annotation started from: consensus, best, fallback or flat (the same for "
            "every annotator of the sentence); null before the first save"
        ),
    )
    start_grammar_version: int | None = Field(
        default=None, description=("number of the grammar version whose suggestion it started from")
    )


class RevisionPublic(BaseModel):
    number: int
    tree: str
    pins: Pins
    source: str
    created_at: UtcDateTime


class AlternativePublic(BaseModel):
    tree: str
    probability: float | None = Field(
        description="P(tree | words) under the grammar; None for a fallback tree"
    )


class SuggestionPublic(BaseModel):
    grammar_version: int = Field(description="number of the grammar version that parsed")
    alternatives: list[AlternativePublic]
    posteriors: list[tuple[str, int, int, float]] = Field(
        description="[label, start, end, p]: posterior of each labelled span (labels without "
        "function tags); spans not listed are below 0.001"
    )
    consensus: str | None = Field(
        default=None,
        description=(
            "the consensus tree: the brackets most probable over all the grammar's readings "
            "(expected labelled recall, each bracket kept when its posterior exceeds the cost); "
            "null until complete, and for a fallback"
        ),
    )
    fallback: bool
    seconds: float
    complete: bool = Field(
        description="posteriors and probabilities are in; when false, "
        "GET /api/bench/{id}/suggestion computes them"
    )
    stale: bool = Field(
        default=False,
        description="parsed by a grammar version that is no longer the corpus's active one",
    )


class BenchPublic(BaseModel):
    sentence: SentencePublic
    annotation: AnnotationPublic
    tree: str = Field(description="the tree to show: the newest revision, or the start tree")
    pins: Pins
    source: str
    start_note: str | None = Field(
        description="set when the tree is a start tree, not a saved revision"
    )
    editable: bool
    start_kind: str | None = Field(
        default=None,
        description=(
            "the sentence's fixed start, the same for all its annotators (consensus, best, "
            "fallback, flat); null while it has none"
        ),
    )
    start_grammar_version: int | None = None
    suggestion: SuggestionPublic | None
    labels: list[str]
    tags: list[str]
    unknown_label_policy: Literal["confirm", "refuse"]
    queue: QueuePlace
    unseen_words: list[int] = Field(
        default_factory=list,
        description=("positions (0-based) of the words the active grammar never saw in training"),
    )
    token_version: int = Field(
        default=1,
        description="the version of the sentence's tokens (1 as imported; each token fix adds one)",
    )
    carried_from: int | None = Field(
        default=None,
        description=(
            "set when your newest revision was made on this earlier token version: the tree shown "
            "is it carried over to the current tokens, and the page saves it"
        ),
    )
    split_offered: bool = Field(
        False,
        description=(
            "the sentence is longer than the parser takes on request: it is shown unparsed, and "
            "splitting it into shorter sentences would bring suggestions"
        ),
    )


class TokenChangeRequest(RequestModel):
    base: int = Field(ge=1, description="your head revision (the tree the fix carries over)")
    position: int = Field(ge=0, description="the first token replaced (0-based)")
    count: Literal[1, 2] = Field(
        description="1: split or respell that token; 2: join it with the next one"
    )
    tokens: list[str] = Field(
        min_length=1, max_length=2, description="the tokens that take their place (two: a split)"
    )


class TokenFixRequest(TokenChangeRequest):
    """A token change with the page's effort since its last save."""

    active_seconds: float = Field(
        default=0.0,
        ge=0,
        le=86_400,
        description="active editing time since the previous save, measured by the page",
    )
    actions: dict[str, int] = Field(
        default_factory=dict,
        max_length=20,
        description=(
            "edit actions since the previous save by kind (the fix itself is counted as one "
            "'tokens' action by the service): " + ", ".join(ACTION_KINDS)
        ),
    )


class TokenFixPublic(BaseModel):
    annotation: AnnotationPublic
    revision: RevisionPublic
    tokens: list[str]
    token_version: int
    undo: TokenChangeRequest = Field(
        description="the fix that takes this one back (base to be filled with the head then)"
    )


class RevisionCreate(RequestModel):
    base: int = Field(ge=0, description="the head revision this change was built on")
    tree: str = Field(max_length=200_000, description="bracketed text of the whole tree")
    pins: Pins = Field(default_factory=Pins)
    source: RevisionSource = "edit"
    confirm_labels: bool = Field(
        default=False,
        description="accept labels outside the corpus's sets (only when its policy is confirm)",
    )
    active_seconds: float = Field(
        default=0.0,
        ge=0,
        le=86_400,
        description=(
            "active editing time since the previous save, measured by the page (idle gaps over "
            "60 s left out)"
        ),
    )
    actions: dict[str, int] = Field(
        default_factory=dict,
        max_length=20,
        description=("edit actions since the previous save by kind: " + ", ".join(ACTION_KINDS)),
    )
    start: str | None = Field(
        default=None,
        max_length=200_000,
        description=("with the first save: the tree the work started from (the suggestion shown)"),
    )


class SavePublic(BaseModel):
    annotation: AnnotationPublic
    revision: RevisionPublic


class SubmitRequest(RequestModel):
    base: int = Field(ge=0, description="the head revision the annotator saw when submitting")


class NoteUpdate(RequestModel):
    comment: str | None = Field(default=None, max_length=4_000)
    flag: str | None = Field(
        default=None, max_length=64, description="hold the sentence back with this reason"
    )
    clear_flag: bool = False


class ReparseRequest(RequestModel):
    pins: Pins = Field(default_factory=Pins)
    k: int = Field(default=1, ge=1, le=50, description="readings under the constraints")
    tree: str | None = Field(
        default=None,
        max_length=200_000,
        description=(
            "the tree being re-parsed (bracketed text): its brackets and tags are kept where the "
            "grammar has no clear reason to change them, and the answer says what would change"
        ),
    )


class ChangesPublic(BaseModel):
    added: list[tuple[str, int, int]]
    removed: list[tuple[str, int, int]]
    relabelled: list[tuple[int, int, str, str]] = Field(
        description="[start, end, old label, new label]"
    )
    retagged: list[tuple[int, str, str]] = Field(description="[word index, old tag, new tag]")
    count: int = Field(description="edits the re-parse makes (a relabel counts once)")


class ReparsePublic(BaseModel):
    trees: list[str] = Field(
        description="the proposal first (the consensus tree under "
        "everything said), then the readings; every one "
        "keeps every pin and everything said"
    )
    readings: list[AlternativePublic] = Field(
        default_factory=list,
        description="the k best readings under the constraints, with "
        "P(reading | words, constraints)",
    )
    plausible: bool = Field(
        default=True,
        description=(
            "false when the grammar found no tree under the constraints or its best is far less "
            "probable than its unconstrained best: show it, do not apply it by itself"
        ),
    )
    reasons: list[str] = Field(default_factory=list)
    summary: str = ""
    changes: ChangesPublic | None = Field(
        default=None,
        description=("what the proposal changes in the tree sent (null when none was sent)"),
    )
    stand_ins: list[tuple[int, int, str]] = Field(
        default_factory=list,
        description="said brackets whose label the grammar never builds "
        "over those words (kept as said)",
    )
    posteriors: list[tuple[str, int, int, float]] = Field(
        default_factory=list,
        description="[label, start, end, p] under everything said: the "
        "grammar's belief about the rest of the tree",
    )
    tag_posteriors: list[dict[str, float]] = Field(
        default_factory=list, description="per word, {tag: p} under everything said"
    )
    fallback: bool = Field(
        description="the grammar had no parse keeping the pins; the tree "
        "is a well-formed stand-in that still keeps them"
    )
    seconds: float
    grammar_version: int


class BenchErrorPublic(BaseModel):
    """A refused change (422) or a stale one (409)."""

    detail: str | list[dict[str, Any]] = Field(
        description="what is wrong; a list of field errors when the body does not fit the schema"
    )
    kind: str | None = None
    line: int | None = None
    column: int | None = None
    position: int | None = None
    expected: str | None = None
    found: str | None = None
    labels: list[str] | None = None
    can_confirm: bool | None = None
    current: RevisionPublic | None = None
    head: int | None = None
    state: str | None = None


class QueuePublic(BaseModel):
    """One page of your queue. ``next_cursor`` (null on the last page) goes back as
    ``after`` for the next one; ``first_index`` is the 1-based place of the first item."""

    total: int
    submitted: int
    first_index: int = 1
    next_cursor: str | None = None
    items: list[QueueItem]


class ParsePlacePublic(BaseModel):
    """Where the parse that opening a sentence needs stands: ``ready`` when the Bench can be
    drawn now; otherwise ``ahead`` parses run or wait before it (0: it is running)."""

    ready: bool
    ahead: int = 0
