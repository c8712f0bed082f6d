"""A corpus's settings, defined once: their types, defaults, bounds and help.

Stored as JSON in ``corpora.settings``; every read goes through :class:`CorpusSettings`
(``corpus.options``), so a value is always of its declared type and within its bounds. Writes go
through :func:`checked_update`, which refuses an unknown key or a bad value with a message that
names the setting. The corpus page renders its form from :data:`EDITABLE` (the same help text).
"""

from __future__ import annotations

from enum import StrEnum
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from parser.adapt import describe, parse_weighting
from parser.errors import GrammarError


class LabelPolicy(StrEnum):
    """What the Bench does with a label outside the corpus's label or tag set."""

    CONFIRM = "confirm"  # ask the annotator to confirm it
    REFUSE = "refuse"  # reject the tree


class SettleOwnPolicy(StrEnum):
    """Whether an adjudicator may settle a sentence they annotated themselves."""

    IF_ALONE = "if_alone"  # only when no other active adjudicator or admin exists
    ALWAYS = "always"
    NEVER = "never"


class QueueOrder(StrEnum):
    """The order in which the queue offers a corpus's open sentences."""

    DOCUMENT = "document"  # documents in order, sentences in order within each
    INFORMATIVE = "informative"  # the active grammar's least certain sentences first


#: The choices of each setting that takes one of a few words.
CHOICES: dict[str, type[StrEnum]] = {
    "unknown_label_policy": LabelPolicy,
    "settle_own_annotation": SettleOwnPolicy,
    "queue_order": QueueOrder,
}
#: The value of ``reference_weight`` that lets held-out F1 choose the weighting.
AUTO_WEIGHT = "auto"


class CorpusSettings(BaseModel):
    """Every per-corpus setting with its default; unknown stored keys are ignored on read."""

    model_config = ConfigDict(extra="ignore", frozen=True, allow_inf_nan=False)

    annotators_per_sentence: int = Field(
        2, ge=1, le=10, description="How many people annotate each sentence blind."
    )
    auto_gold_when_identical: bool = Field(
        True, description="Identical submitted trees become gold without review."
    )
    retrain_every: int = Field(
        25,
        ge=0,
        le=100_000,
        description="Train the next grammar after this many new gold trees (0: only on demand).",
    )
    max_f1_drop: float = Field(
        0.01,
        ge=0.0,
        le=1.0,
        description="A new grammar becomes active unless its held-out F1 is lower by more "
        "than this, beyond the sampling noise (the 95% interval of the drop lies above it).",
    )
    heldout_every: int = Field(
        10, ge=2, le=1000, description="Every n-th gold tree is held out to score a new grammar."
    )
    unknown_label_policy: LabelPolicy = Field(
        LabelPolicy.CONFIRM,
        description="A label outside the label set: 'confirm' asks, 'refuse' rejects.",
    )
    settle_own_annotation: SettleOwnPolicy = Field(
        SettleOwnPolicy.IF_ALONE,
        description="An adjudicator settling a sentence they annotated: 'if_alone' only when "
        "no other adjudicator or admin exists, 'always', or 'never'. Always "
        "recorded in the gold history.",
    )
    gold_visible_to_annotators: bool = Field(
        True,
        description="Annotators may search the gold trees (they always see their own "
        "work, never another annotator's).",
    )
    retrain_every_early: int = Field(
        10,
        ge=0,
        le=100_000,
        description="While the corpus has fewer gold trees than early_gold_limit, train after "
        "this many new gold trees instead (0: always use retrain_every).",
    )
    early_gold_limit: int = Field(
        200, ge=0, le=1_000_000, description="Gold trees up to which retrain_every_early applies."
    )
    reference_weight: str = Field(
        AUTO_WEIGHT,
        description="How much an in-domain gold tree counts against the reference trees: "
        "'auto' (the best of a small grid by held-out F1 once 20 gold trees are "
        "held out, a measured default before), a number (e.g. 5) or "
        "'rules=N,lexicon=N'.",
    )
    refine_cycles: int = Field(
        4,
        ge=0,
        le=6,
        description="Split-merge cycles tried at each retraining once the corpus has "
        "refine_min_gold gold trees: a refined grammar of 1 to this many cycles is used "
        "when its held-out F1 beats the plain grammar's (0: never refine).",
    )
    refine_min_gold: int = Field(
        500,
        ge=1,
        le=1_000_000,
        description="Gold trees a corpus needs before refined grammars are tried (with few "
        "trees the learnt splits overfit and the plain grammar wins).",
    )
    queue_order: QueueOrder = Field(
        QueueOrder.DOCUMENT,
        description="'document': sentences in document order; 'informative': the sentences "
        "the active grammar is least sure of first, ranked each time a grammar "
        "version becomes active (both annotators of a sentence get it at the same "
        "place).",
    )
    visible_to_everyone: bool = Field(
        False,
        description="Every account may read this corpus: its sentences, who is assigned "
        "to them and its agreement log. Otherwise only its members: the "
        "annotators assigned in it, adjudicators and admins.",
    )
    keep_grammars: int = Field(
        5,
        ge=0,
        le=10_000,
        description="Saved grammars kept besides the active one (the newest); older versions "
        "keep their record and scores but not the grammar itself (0: keep all).",
    )
    refresh_lookahead: int = Field(
        10,
        ge=0,
        le=10_000,
        description="After a new grammar becomes active, the next this many sentences of each "
        "annotator's queue get its suggestion at once; the rest are parsed when opened "
        "(0: all when opened).",
    )
    heldout_sample: int = Field(
        200,
        ge=20,
        le=100_000,
        description="At most this many held-out gold trees, drawn at random, score a new "
        "grammar; the score carries its 95% interval.",
    )
    # not on the form: set when a corpus is created without label and tag sets
    derive_inventory: bool = Field(
        False, description="The label and tag sets grow with every bracketed import."
    )

    @field_validator("reference_weight")
    @classmethod
    def _weighting(cls, value: str) -> str:
        value = value.strip().lower()
        if value == AUTO_WEIGHT:
            return value
        try:
            return describe(parse_weighting(value))
        except GrammarError as exc:
            raise ValueError(f"not 'auto' or a weighting: {exc}") from None


def retrain_interval(options: CorpusSettings, gold: int) -> int:
    """New gold trees between two automatic versions: ``retrain_every``, or the smaller
    ``retrain_every_early`` while the corpus has fewer than ``early_gold_limit`` gold trees
    (early suggestions improve within a day); 0: automatic training is off."""
    every = options.retrain_every
    early = options.retrain_every_early
    if every > 0 and early > 0 and gold < options.early_gold_limit:
        return min(every, early)
    return every


#: The settings an admin edits on the corpus page, in the form's order.
EDITABLE: tuple[str, ...] = tuple(k for k in CorpusSettings.model_fields if k != "derive_inventory")


class SettingError(ValueError):
    """A refused setting: ``key`` and a message that names it."""

    def __init__(self, key: str, message: str) -> None:
        super().__init__(message)
        self.key = key


def read(stored: dict[str, Any] | None) -> CorpusSettings:
    """The typed settings of a stored JSON object (defaults for missing keys; a stored value
    that no longer passes its bounds falls back to the default rather than break a page)."""
    values = dict(stored or {})
    try:
        return CorpusSettings.model_validate(values)
    except ValidationError as exc:
        for err in exc.errors():
            if err["loc"]:
                values.pop(str(err["loc"][0]), None)
        return CorpusSettings.model_validate(values)


def bounds(key: str) -> tuple[float | None, float | None]:
    """The lowest and highest value a numeric setting takes (None: unbounded)."""
    low = high = None
    for meta in CorpusSettings.model_fields[key].metadata:
        low = getattr(meta, "ge", low)
        high = getattr(meta, "le", high)
    return low, high


def _message(key: str, raw: Any, error_type: str) -> str:
    field = CorpusSettings.model_fields[key]
    if field.annotation is bool or error_type.startswith("bool"):
        return f"setting {key}: {raw!r} is not yes or no"
    if error_type == "enum":
        return f"setting {key}: {raw!r} is not one of {', '.join(p.value for p in CHOICES[key])}"
    if error_type in ("greater_than_equal", "less_than_equal"):
        return f"setting {key}: {raw} is outside {'..'.join(map(str, bounds(key)))}"
    if key == "reference_weight":
        return (
            f"setting {key}: {raw!r} is not 'auto', a number or a weighting such as "
            "'rules=2,lexicon=8'"
        )
    what = "an integer" if field.annotation is int else "a number"
    return f"setting {key}: {raw!r} is not {what}"


def checked_update(current: dict[str, Any] | None, changes: dict[str, Any]) -> dict[str, Any]:
    """The stored JSON after applying ``changes`` (form strings or JSON values); SettingError
    naming the first unknown key or bad value. Only keys that were stored or changed are kept,
    so a later change of a default still reaches corpora that never set the value."""
    for key in changes:
        if key not in EDITABLE:
            raise SettingError(key, f"unknown corpus setting {key!r}; known: {', '.join(EDITABLE)}")
    cleaned = {k: (v.strip() if isinstance(v, str) else v) for k, v in changes.items()}
    for key, value in cleaned.items():
        if CorpusSettings.model_fields[key].annotation is bool and value == "":
            cleaned[key] = False  # an empty form value is "no"
    try:
        typed = CorpusSettings.model_validate({**(current or {}), **cleaned})
    except ValidationError as exc:
        err = exc.errors()[0]
        key = str(err["loc"][0])
        raise SettingError(key, _message(key, changes.get(key), err["type"])) from None
    keep = set(current or {}) | set(cleaned)
    return {k: v for k, v in typed.model_dump(mode="json").items() if k in keep}
