"""Parser suggestions for the Bench: grammar cache, cached k-best suggestions, constrained
re-parse around the annotator's pins.

* :func:`grammar_for` loads a GrammarVersion's saved bytes once per process and keeps the few
  most recently used grammars in memory (an LRU of :data:`GRAMMAR_CACHE_SIZE`), so a request
  never pays for loading a grammar twice.
* :func:`suggestion_for` returns the Suggestion row of (sentence, active grammar), parsing only
  when the row does not exist yet (k-best with span posteriors). After a new grammar becomes
  active, :mod:`app.services.refresh` fills those rows for the next sentences of each
  annotator's queue (bounded); every other sentence is parsed here when opened.
  :func:`refresh_unstarted` fills them for every sentence nobody has started (the former
  eager refresh; kept for scripts and for measuring against).
* :func:`warm_up` runs when a server starts, so that the first annotator after a restart
  does not wait for the compiled chart loops or the grammar to load.
* :func:`reparse` re-parses around everything the annotator has said (pins, edited and
  removed brackets, corrected tags; :mod:`parser.reparse`): the consensus tree under those
  constraints, the k best readings, whether the result is plausible, and what it would change
  in the annotator's tree. Every said label survives to the letter.

What a Suggestion row holds (this module writes them; the JSON columns are plain lists):
``trees`` one-line bracketed texts, best first; ``logprobs`` log P(tree | words), i.e. the
parser's joint log-probability minus the sentence's inside log-probability (``None`` for a
fallback tree, which has no probability); ``posteriors`` ``[label, start, end, p]`` for every
labelled span with p >= the parser's threshold; ``consensus`` the consensus tree (the brackets
most probable under all the grammar's readings, :mod:`parser.consensus`; more accurate than the
best single reading, so a new annotation starts from it when it is there); ``fallback`` true
when the grammar had no parse and the tree is the parser's well-formed stand-in. A row
written by the fast path (``complete=False``) has the trees only: ``logprobs`` all ``None``,
``posteriors`` empty and no consensus until completed (:func:`is_complete`).

Cost: one parse is O(n^3 R) (see :mod:`parser.chart`); about 0.1-0.5 s for 30 words with a
grammar trained on GUM, which is why suggestions are cached in the table.
"""

from __future__ import annotations

import math
import os
import tempfile
import threading
from collections import OrderedDict
from dataclasses import dataclass
from typing import Any, cast

from sqlalchemy import CursorResult, delete, exists, select, update
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session, sessionmaker, undefer

from app.models import (
    GV_READY,
    SENT_IN_PROGRESS,
    SENT_QUEUED,
    START_BEST,
    START_CONSENSUS,
    START_FALLBACK,
    START_FLAT,
    Annotation,
    Corpus,
    GrammarVersion,
    Sentence,
    Suggestion,
)
from app.services.admission import admission
from app.services.errors import BadInput, Conflict, NotFound
from app.services.validation import stored_words, validate_tree_text
from parser import reparse as loop
from parser.batch import parse_many
from parser.chart import ParseResult, parse
from parser.errors import ConstraintError, GrammarError
from parser.grammar import Grammar
from parser.reparse import Changes, Outcome, Said
from parser.trees import flat_tree, write_tree

GRAMMAR_CACHE_SIZE = 3

# keyed by (database URL, version id): ids repeat across databases (tests, several corpora
# files), a grammar row never changes once ready.
_grammars: OrderedDict[tuple[str, int, str], Grammar] = OrderedDict()
_grammar_lock = threading.Lock()


# --------------------------------------------------------------------------- grammars
def grammar_from_bytes(data: bytes) -> Grammar:
    """A Grammar from the bytes :meth:`Grammar.save` wrote (via a private temporary file)."""
    fd, path = tempfile.mkstemp(suffix=".npz", prefix="tw-grammar-")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        return Grammar.load(path)
    finally:
        os.unlink(path)


def grammar_for(db: Session, version_id: int) -> Grammar:
    """The loaded grammar of a GrammarVersion, from the per-process cache when possible.

    The cache key holds the version's creation time besides its id: ids come back when a
    database is emptied or restored, and another version with the same id must not be served
    the old grammar."""
    created = db.scalar(select(GrammarVersion.created_at).where(GrammarVersion.id == version_id))
    if created is None:
        raise NotFound(f"grammar version {version_id} has no saved grammar")
    key = (str(db.get_bind().engine.url), version_id, created.isoformat())
    with _grammar_lock:
        cached = _grammars.get(key)
        if cached is not None:
            _grammars.move_to_end(key)
            return cached
    version = db.scalar(
        select(GrammarVersion)
        .options(undefer(GrammarVersion.data))
        .where(GrammarVersion.id == version_id)
    )
    if version is None or not version.data:
        raise NotFound(f"grammar version {version_id} has no saved grammar")
    try:
        grammar = grammar_from_bytes(version.data)
    except GrammarError as exc:
        raise Conflict(
            f"grammar version {version_id} cannot be loaded: {exc}", kind="no_grammar"
        ) from exc
    # The first parse in a process compiles the chart's loops; pay it here, not on a request
    # that an annotator is waiting for more than this one.
    parse(grammar, ["a", "b"])
    with _grammar_lock:
        _grammars[key] = grammar
        _grammars.move_to_end(key)
        while len(_grammars) > GRAMMAR_CACHE_SIZE:
            _grammars.popitem(last=False)
    return grammar


def warm_up(factory: sessionmaker[Session]) -> list[int]:
    """Make the first parse of this process fast: load the chart's compiled loops (through a
    two-word grammar) and the active grammars of the corpora (at most the cache's size).
    Returns the ids of the grammar versions loaded. Called once when the server starts."""
    tiny = Grammar.from_text("1.0 S -> A B\n1.0 A -> 'a'\n1.0 B -> 'b'")
    parse(tiny, ["a", "b"], k=2, posteriors=True)
    loaded: list[int] = []
    with factory() as db:
        ids = db.scalars(
            select(Corpus.active_grammar_id)
            .where(Corpus.active_grammar_id.is_not(None))
            .order_by(Corpus.id)
        ).all()
        for version_id in [i for i in ids if i is not None][:GRAMMAR_CACHE_SIZE]:
            try:
                grammar_for(db, version_id)
            except (NotFound, Conflict):  # no saved grammar: nothing to warm
                continue
            loaded.append(version_id)
    return loaded


def forget_grammars() -> None:
    """Empty the per-process cache (tests; a grammar row that was replaced)."""
    with _grammar_lock:
        _grammars.clear()


def active_version(db: Session, corpus: Corpus) -> GrammarVersion | None:
    if corpus.active_grammar_id is None:
        return None
    version = db.get(GrammarVersion, corpus.active_grammar_id)
    if version is None or version.status != GV_READY:
        return None
    return version


# --------------------------------------------------------------------------- suggestions
def parse_suggestion(
    grammar: Grammar, word_list: list[str], k: int, complete: bool = True
) -> dict[str, Any]:
    """Parse once and return the Suggestion row's column values (see the module docstring);
    without ``complete`` only the k best trees (no posteriors, no probabilities)."""
    return suggestion_values(parse(grammar, word_list, k=k, posteriors=complete), complete=complete)


def suggestion_values(result: ParseResult, complete: bool = True) -> dict[str, Any]:
    """A Suggestion row's column values from a parse (with posteriors when ``complete``)."""
    inside = result.inside_logprob
    logprobs: list[float | None] = []
    for lp in result.logprobs:
        if not complete or result.fallback or inside is None or not math.isfinite(lp):
            logprobs.append(None)
        else:
            logprobs.append(min(0.0, lp - inside))
    return {
        "trees": [write_tree(t) for t in result.trees],
        "logprobs": logprobs,
        "posteriors": [
            [lab, int(s), int(e), round(float(p), 4)] for lab, s, e, p in result.posteriors
        ],
        "consensus": write_tree(result.consensus) if result.consensus is not None else None,
        "fallback": bool(result.fallback),
        "seconds": float(result.seconds),
    }


def is_complete(row: Suggestion) -> bool:
    """Whether a row has its posteriors and probabilities. A computed posterior list is never
    empty (the root span's posterior is 1), so an empty one means "not computed yet"; a
    fallback tree has none to compute."""
    return bool(row.posteriors) or row.fallback


def _sentence_words(sentence: Sentence) -> list[str]:
    return stored_words(sentence)


def suggestion_for(
    db: Session,
    sentence: Sentence,
    corpus: Corpus,
    k: int,
    complete: bool = True,
    wait: float | None = None,
) -> Suggestion | None:
    """The cached suggestion under the active grammar, parsed now if missing; None when the
    corpus has no active grammar. Commits when it adds or completes a row.

    ``complete=False`` is the fast path for drawing a page: a missing row is filled with the
    k best trees only (span posteriors roughly quadruple the parse time); a later call with
    ``complete=True`` adds posteriors and probabilities to the same row. ``wait`` bounds the
    wait for a parse (default the admission pool's; 0 only asks and raises
    :class:`~app.services.admission.ParserBusy` with the place in line if the answer is not
    there yet)."""
    version = active_version(db, corpus)
    if version is None:
        return None
    return _suggestion_under(db, sentence, version, k, complete, wait)


def _suggestion_under(
    db: Session,
    sentence: Sentence,
    version: GrammarVersion,
    k: int,
    complete: bool,
    wait: float | None = None,
) -> Suggestion | None:
    """The cached suggestion of ``sentence`` under ``version``, parsed now if missing."""
    row = _cached(db, sentence.id, version.id)
    if row is not None and (is_complete(row) or not complete):
        return row
    word_list = _sentence_words(sentence)
    if too_long(word_list):
        return None
    grammar = grammar_for(db, version.id)
    key = ("suggestion", str(db.get_bind().engine.url), version.id, tuple(word_list), k, complete)
    values = admission().run(
        key, lambda: parse_suggestion(grammar, word_list, k, complete=complete), wait=wait
    )
    if row is not None:  # complete the fast row in place; the parse is deterministic
        for key, value in values.items():
            setattr(row, key, value)
        db.commit()
        return row
    row = Suggestion(sentence_id=sentence.id, grammar_version_id=version.id, **values)
    db.add(row)
    try:
        db.commit()
    except IntegrityError:  # another request cached it first: use theirs
        db.rollback()
        row = _cached(db, sentence.id, version.id)
    return row


def unseen_words(db: Session, sentence: Sentence, corpus: Corpus) -> list[int]:
    """Positions of the sentence's words that the active grammar never saw in training (it
    tags them by their spelling signature only); empty without an active grammar."""
    version = active_version(db, corpus)
    if version is None:
        return []
    try:
        grammar = grammar_for(db, version.id)
    except (NotFound, Conflict):  # no loadable grammar: nothing to compare with
        return []
    known = len(grammar.vocab)
    return [
        i
        for i, w in enumerate(_sentence_words(sentence))
        if not 0 <= grammar.word_column(w, first=i == 0) < known
    ]


def _cached(db: Session, sentence_id: int, version_id: int) -> Suggestion | None:
    return db.scalar(
        select(Suggestion).where(
            Suggestion.sentence_id == sentence_id, Suggestion.grammar_version_id == version_id
        )
    )


def refresh_unstarted(
    db: Session,
    corpus: Corpus,
    grammar_version: GrammarVersion,
    k: int = 5,
    batch: int = 200,
    processes: int | None = None,
) -> int:
    """Cache suggestions under ``grammar_version`` for every open (queued or in progress)
    sentence of ``corpus`` that nobody has started (no annotation with a saved revision) and
    that lacks one.

    Sentences are parsed ``batch`` at a time on every core (:func:`parser.batch.parse_many`;
    ``processes=1`` keeps it in this process) and each batch is committed, so an interrupted
    refresh keeps what it finished. Returns the number of suggestions computed."""
    started = exists().where(Annotation.sentence_id == Sentence.id, Annotation.head > 0)
    cached = exists().where(
        Suggestion.sentence_id == Sentence.id, Suggestion.grammar_version_id == grammar_version.id
    )
    # Gold and in-review sentences need no suggestion: nobody will open them on the Bench.
    open_states = (SENT_QUEUED, SENT_IN_PROGRESS)
    todo = db.scalars(
        select(Sentence)
        .where(Sentence.corpus_id == corpus.id, ~started, ~cached, Sentence.state.in_(open_states))
        .order_by(Sentence.id)
    ).all()
    if not todo:
        return 0
    grammar = grammar_for(db, grammar_version.id)
    done = 0
    for at in range(0, len(todo), batch):
        part = todo[at : at + batch]
        results = parse_many(
            grammar, [_sentence_words(s) for s in part], k=k, posteriors=True, processes=processes
        )
        for sentence, result in zip(part, results, strict=True):
            db.add(
                Suggestion(
                    sentence_id=sentence.id,
                    grammar_version_id=grammar_version.id,
                    **suggestion_values(result),
                )
            )
        db.commit()
        done += len(part)
    return done


def prune(db: Session, corpus: Corpus, keep_grammars: int) -> tuple[int, int]:
    """After a new grammar becomes active: delete the suggestions of other versions for
    sentences nobody has started (a started sentence keeps what it was started from, and so
    does a sentence whose start is fixed to that version), and
    drop the saved grammar of versions older than the ``keep_grammars`` newest ones besides
    the active one (0: keep all); their records and scores stay. Does not commit. Returns
    (suggestions deleted, grammars dropped)."""
    active = corpus.active_grammar_id
    if active is None:
        return 0, 0
    others = select(GrammarVersion.id).where(
        GrammarVersion.corpus_id == corpus.id, GrammarVersion.id != active
    )
    started = exists().where(Annotation.sentence_id == Suggestion.sentence_id, Annotation.head > 0)
    # a start fixed on the sentence (its first opening) keeps the row every annotator of the
    # sentence starts from, so the next opener is not parsed again under the old version
    fixed = exists().where(
        Sentence.id == Suggestion.sentence_id,
        Sentence.start_grammar_version_id == Suggestion.grammar_version_id,
    )
    deleted = db.execute(
        delete(Suggestion)
        .where(Suggestion.grammar_version_id.in_(others), ~started, ~fixed)
        .execution_options(synchronize_session=False)
    )
    dropped = 0
    if keep_grammars > 0:
        saved = db.scalars(
            others.where(GrammarVersion.data.is_not(None)).order_by(GrammarVersion.number.desc())
        ).all()
        old = list(saved[keep_grammars:])
        if old:
            dropped = cast(
                CursorResult[Any],
                db.execute(
                    update(GrammarVersion)
                    .where(GrammarVersion.id.in_(old))
                    .values(data=None)
                    .execution_options(synchronize_session=False)
                ),
            ).rowcount
    return cast(CursorResult[Any], deleted).rowcount, dropped


# --------------------------------------------------------------------------- start tree
@dataclass
class StartTree:
    """What a new annotation starts from: the consensus or best reading, or a flat tree.

    ``kind`` is one of :data:`app.models.START_KINDS`; ``grammar_version_id`` /
    ``grammar_version`` (its number) and ``suggestion_id`` name the suggestion it came from
    (None for a flat tree)."""

    tree: str
    source: str  # "suggestion" | "flat"
    note: str
    kind: str = START_FLAT
    grammar_version_id: int | None = None
    grammar_version: int | None = None
    suggestion_id: int | None = None


def start_tree(
    sentence: Sentence, suggestion: Suggestion | None, version_number: int | None = None
) -> StartTree:
    """The consensus tree when the suggestion has one, else its best reading, else flat."""
    of = f" (grammar version {version_number})" if version_number is not None else ""
    if suggestion is not None and suggestion.consensus:
        return StartTree(
            suggestion.consensus,
            "suggestion",
            f"Consensus of the grammar{of}: the brackets most probable over all its readings.",
            START_CONSENSUS,
            suggestion.grammar_version_id,
            version_number,
            suggestion.id,
        )
    if suggestion is not None and suggestion.trees:
        fallback = suggestion.fallback
        note = (
            f"The grammar{of} found no full parse; this is its fallback tree."
            if fallback
            else f"Best reading of the grammar{of}."
        )
        return StartTree(
            suggestion.trees[0],
            "suggestion",
            note,
            START_FALLBACK if fallback else START_BEST,
            suggestion.grammar_version_id,
            version_number,
            suggestion.id,
        )
    word_list = _sentence_words(sentence)
    tree = flat_tree(word_list)
    if too_long(word_list):
        return StartTree(
            write_tree(tree),
            "flat",
            f"This sentence has {len(word_list)} words, more than the "
            f"{admission().max_words} the parser takes on request: it starts flat. "
            "Split it into shorter sentences to get suggestions.",
        )
    return StartTree(write_tree(tree), "flat", "No grammar yet: starting from a flat tree.")


def fixed_start(
    db: Session, sentence: Sentence, corpus: Corpus, k: int, wait: float | None = None
) -> StartTree:
    """The start every annotator of ``sentence`` gets, fixing it on the sentence if nobody has.

    The first opening under a grammar fixes the sentence's start to that grammar version's
    suggestion (its consensus tree, parsed completely now if the cached row lacks it), with a
    compare-and-set so that two first openings at once agree; later openings get the same
    tree whatever grammar is active by then. Without any grammar the start is a flat tree,
    fixed only when the first annotation is created (:func:`record_start`), so a sentence
    merely looked at before the first grammar still gets that grammar's suggestion.
    Commits when it fixes a start. ``wait`` as in :func:`suggestion_for`."""
    for _ in range(2):
        if sentence.start_kind == START_FLAT:
            return start_tree(sentence, None)
        if sentence.start_kind is not None and sentence.start_grammar_version_id is not None:
            fixed = db.get(GrammarVersion, sentence.start_grammar_version_id)
            if fixed is not None and fixed.status == GV_READY:
                # parsed again under the same version when the row is gone (a token fix
                # removes a sentence's suggestions): every annotator still gets one grammar
                try:
                    row = _suggestion_under(db, sentence, fixed, k, complete=True, wait=wait)
                except (NotFound, Conflict):  # its saved grammar is gone: fix a new start
                    row = None
                if row is not None:
                    return start_tree(sentence, row, fixed.number)
        version = active_version(db, corpus)
        if version is None:
            return start_tree(sentence, None)
        row = suggestion_for(db, sentence, corpus, k, complete=True, wait=wait)
        start = start_tree(sentence, row, version.number)
        moved = db.execute(
            update(Sentence)
            .where(
                Sentence.id == sentence.id,
                (Sentence.start_kind.is_(None))
                | (
                    (Sentence.start_kind != START_FLAT)
                    & (
                        Sentence.start_grammar_version_id.is_(None)
                        | (Sentence.start_grammar_version_id == sentence.start_grammar_version_id)
                    )
                ),
            )
            .values(start_kind=start.kind, start_grammar_version_id=version.id)
            .execution_options(synchronize_session=False)
        )
        db.commit()
        db.refresh(sentence)
        if cast(CursorResult[Any], moved).rowcount == 1:
            return start
        # another first opening fixed it meanwhile: take theirs
    return start_tree(sentence, None)


def record_start(db: Session, annotation: Annotation, sentence: Sentence) -> None:
    """Copy the sentence's fixed start onto a new annotation (no commit). A sentence nobody
    opened under a grammar gets the flat start fixed now."""
    if sentence.start_kind is None:
        db.execute(
            update(Sentence)
            .where(Sentence.id == sentence.id, Sentence.start_kind.is_(None))
            .values(start_kind=START_FLAT)
            .execution_options(synchronize_session=False)
        )
        db.refresh(sentence)
    annotation.start_kind = sentence.start_kind
    annotation.start_grammar_version_id = sentence.start_grammar_version_id
    if sentence.start_grammar_version_id is not None:
        row = _cached(db, sentence.id, sentence.start_grammar_version_id)
        annotation.start_suggestion_id = row.id if row is not None else None


# --------------------------------------------------------------------------- re-parse
@dataclass
class Reparse:
    outcome: Outcome
    changes: Changes | None
    summary: str
    grammar_version: int


def said_from_pins(pins: dict[str, Any], n: int) -> Said:
    """What the annotator has said (:class:`parser.reparse.Said`) from the Bench's pins: pins
    and edited brackets are required, corrected tags fixed, removed brackets forbidden.
    Raises BadInput for a span or word outside the sentence, or two tags for one word."""
    required: dict[tuple[int, int, str], None] = {}
    for key in ("spans", "edited_spans"):
        for item in pins.get(key) or []:
            s, e, label = int(item[0]), int(item[1]), str(item[2])
            if not 0 <= s < e <= n:
                raise BadInput(
                    f"pinned span ({s}, {e}) lies outside the sentence's {n} words", kind="pins"
                )
            required[(s, e, label)] = None
    forbidden: dict[tuple[int, int], None] = {}
    for item in pins.get("removed_spans") or []:
        s, e = int(item[0]), int(item[1])
        if not 0 <= s < e <= n:
            raise BadInput(
                f"removed span ({s}, {e}) lies outside the sentence's {n} words", kind="pins"
            )
        forbidden[(s, e)] = None
    tags: dict[int, str] = {}
    for key in ("tags", "edited_tags"):
        for item in pins.get(key) or []:
            i, tag = int(item[0]), str(item[1])
            if not 0 <= i < n:
                raise BadInput(
                    f"pinned tag at word {i + 1} lies outside the sentence's {n} words", kind="pins"
                )
            if tags.get(i, tag) != tag:
                raise BadInput(f"word {i + 1} is said to be both {tags[i]} and {tag}", kind="pins")
            tags[i] = tag
    return Said(
        required=tuple(required), forbidden=tuple(forbidden), tags=tuple(sorted(tags.items()))
    )


def _summary(version: int, said: Said, outcome: Outcome, diff: Changes | None) -> str:
    parts = []
    for count, one in (
        (len(said.required), "bracket"),
        (len(said.forbidden), "removed bracket"),
        (len(said.tags), "tag"),
    ):
        if count:
            parts.append(f"{count} {one}{'' if count == 1 else 's'}")
    around = (" around " + ", ".join(parts) + " you set") if parts else ""
    head = f"Re-parsed with grammar version {version}{around}"
    if diff is None:
        return head + "."
    if diff.count == 0:
        return head + ": nothing would change."
    bits = []
    plain_added = len(diff.added) - len(diff.relabelled)
    plain_removed = len(diff.removed) - len(diff.relabelled)
    for count, one in (
        (plain_added, "bracket added"),
        (plain_removed, "bracket removed"),
        (len(diff.relabelled), "relabelled"),
        (len(diff.retagged), "tag changed"),
    ):
        if count:
            word = (
                one if count == 1 else one.replace("bracket ", "brackets ").replace("tag ", "tags ")
            )
            bits.append(f"{count} {word}")
    return head + ": " + ", ".join(bits) + "."


def too_long(word_list: list[str]) -> bool:
    """Whether a sentence is past the length parsed on request (the Bench starts it flat and
    offers to split it)."""
    return len(word_list) > admission().max_words


def reparse(
    db: Session,
    sentence: Sentence,
    corpus: Corpus,
    pins: dict[str, Any],
    k: int = 1,
    tree_text: str | None = None,
) -> Reparse:
    """Re-parse around everything said in ``pins`` (:func:`parser.reparse.reparse`), favouring
    the tree sent (``tree_text``, checked against the sentence's words) and saying what the
    proposal would change in it."""
    version = active_version(db, corpus)
    if version is None:
        raise Conflict(
            "this corpus has no active grammar yet; re-parse needs one", kind="no_grammar"
        )
    word_list = _sentence_words(sentence)
    n = len(word_list)
    if too_long(word_list):
        raise Conflict(
            f"this sentence has {n} words, more than the {admission().max_words} "
            "the parser takes on request; split it first",
            kind="too_long",
        )
    grammar = grammar_for(db, version.id)
    said = said_from_pins(pins, n)
    previous = None
    if tree_text is not None:
        # labels outside the corpus's sets are the save's business, not the re-parse's
        previous = validate_tree_text(sentence, tree_text, corpus, confirm_labels=True)
    key = (
        "reparse",
        str(db.get_bind().engine.url),
        version.id,
        tuple(word_list),
        k,
        said,
        None if previous is None else write_tree(previous),
    )
    try:
        outcome = admission().run(
            key, lambda: loop.reparse(grammar, word_list, said, previous, k=k)
        )
    except ConstraintError as exc:
        raise BadInput(f"what you said contradicts itself: {exc}", kind="pins") from exc
    diff = loop.changes(previous, outcome.tree) if previous is not None else None
    return Reparse(
        outcome=outcome,
        changes=diff,
        summary=_summary(version.number, said, outcome, diff),
        grammar_version=version.number,
    )
