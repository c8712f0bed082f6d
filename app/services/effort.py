"""Time on task and edit effort, per annotator and per corpus, from what the Bench measured.

What it computes
    Every revision carries the active editing seconds and the edit actions (by kind) the page
    measured since the previous save (idle gaps over a minute left out). For the handed-in
    annotations of a corpus, :func:`effort_figures` sums them per annotator and over the
    corpus and derives sentences per hour, seconds per word and actions per sentence. It also
    says how far each handed-in tree is from the tree the annotator started from (the
    suggestion shown before the first save, ``Annotation.start_tree``): labelled bracket F1
    of the handed-in tree scored against the start (PARSEVAL, :func:`parser.scoring.score_pair`
    with its default conventions), and the edit count: brackets (label, start, end) in one and
    not the other, plus words whose POS tag differs. A start on other tokens (a token fix since)
    is left out of those two figures. :func:`effort_rows` formats the figures once, for the
    Agreement page and for :func:`effort_csv` alike.

Complexity: each handed-in annotation's share (its revisions summed, one PARSEVAL comparison,
O(n) for n words) is kept per process and in the database (``effort_shares``, so a new
process computes only the shares changed since) under a fingerprint of the annotation, and so
are the sums (per process and in ``kept_sums``), under the corpus's change mark
(``handed_in_changes`` of its figure marks, moved by database triggers, :mod:`app.counts`).
A view with the mark unchanged reads the marks and the
annotators' names; otherwise one short row per handed-in annotation, recomputing only the
shares whose fingerprint changed.
"""

from __future__ import annotations

import csv
import io
import threading
from collections import defaultdict
from dataclasses import dataclass, field, replace
from datetime import datetime
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.models import (
    ANN_SUBMITTED,
    SENT_DROPPED,
    Annotation,
    Corpus,
    EffortShare,
    FigureMark,
    Revision,
    Sentence,
    User,
)
from app.services import kept_sums
from parser.errors import ParserError
from parser.scoring import score_pair
from parser.trees import constituents, pos_tags, read_tree, words


@dataclass
class Effort:
    """Sums over a set of handed-in annotations."""

    name: str
    sentences: int = 0
    words: int = 0
    seconds: float = 0.0
    actions: int = 0
    by_kind: dict[str, int] = field(default_factory=lambda: defaultdict(int))
    compared: int = 0  # annotations with a start tree on the same tokens
    f1_sum: float = 0.0
    edits: int = 0

    @property
    def sentences_per_hour(self) -> float | None:
        return self.sentences / (self.seconds / 3600) if self.seconds > 0 else None

    @property
    def seconds_per_word(self) -> float | None:
        return self.seconds / self.words if self.words else None

    @property
    def actions_per_sentence(self) -> float | None:
        return self.actions / self.sentences if self.sentences else None

    @property
    def start_f1(self) -> float | None:
        return self.f1_sum / self.compared if self.compared else None

    @property
    def edits_per_sentence(self) -> float | None:
        return self.edits / self.compared if self.compared else None

    def add(
        self,
        n_words: int,
        seconds: float,
        actions: dict[str, int],
        distance: tuple[float, int] | None,
    ) -> None:
        self.sentences += 1
        self.words += n_words
        self.seconds += seconds
        for kind, n in actions.items():
            self.by_kind[kind] += n
            self.actions += n
        if distance is not None:
            self.compared += 1
            self.f1_sum += distance[0]
            self.edits += distance[1]


def start_distance(start_text: str | None, final_text: str) -> tuple[float, int] | None:
    """(labelled F1 of the final tree against the start, edit count), or None without a start
    on the same words."""
    if not start_text:
        return None
    try:
        start, final = read_tree(start_text), read_tree(final_text)
    except ParserError:
        return None
    if words(start) != words(final):
        return None
    f1 = score_pair(start, final).labelled.f1
    edits = len(set(constituents(start)) ^ set(constituents(final))) + sum(
        a != b for a, b in zip(pos_tags(start), pos_tags(final), strict=True)
    )
    return f1, edits


@dataclass(frozen=True)
class _Part:
    """One handed-in annotation's share of the sums."""

    n_words: int
    seconds: float
    actions: dict[str, int]
    distance: tuple[float, int] | None


# Per process, per (database, corpus, corpus creation time): each handed-in annotation's share,
# under the fingerprint it was computed for (head, updated_at, user id). Every write that
# changes an annotation's revisions or hands it in (a save, a token fix, a hand-in, an import)
# sets updated_at to its own time and a save moves the head; a token fix that sends another's
# hand-in back to draft, a removal or a drop takes it out of the list; an id used again comes
# with a later updated_at. A view reads the fingerprints (one short row per handed-in
# annotation, no tree text) and computes only the shares whose fingerprint is new.
_Fingerprint = tuple[int, object, int]
_parts: dict[tuple[str, int, object], dict[int, tuple[_Fingerprint, _Part | None]]] = {}
_parts_lock = threading.Lock()


def _compute_parts(db: Session, anns: list[Annotation]) -> dict[int, _Part | None]:
    """The shares of ``anns`` from their revisions (None: no head revision)."""
    by_ann: dict[int, list[Any]] = defaultdict(list)
    ids = [a.id for a in anns]
    for start in range(0, len(ids), 500):
        for rev in db.execute(  # rows of the columns used, not whole revisions
            select(
                Revision.annotation_id,
                Revision.number,
                Revision.tree,
                Revision.active_seconds,
                Revision.actions,
            ).where(Revision.annotation_id.in_(ids[start : start + 500]))
        ):
            by_ann[rev.annotation_id].append(rev)
    out: dict[int, _Part | None] = {}
    for ann in anns:
        revs = by_ann[ann.id]
        head = next((r for r in revs if r.number == ann.head), None)
        if head is None:
            out[ann.id] = None
            continue
        actions: dict[str, int] = defaultdict(int)
        for r in revs:
            for kind, n in (r.actions or {}).items():
                actions[kind] += int(n)
        out[ann.id] = _Part(
            n_words=len(words(read_tree(head.tree))),
            seconds=sum(r.active_seconds or 0.0 for r in revs),
            actions=dict(actions),
            distance=start_distance(ann.start_tree, head.tree),
        )
    return out


# Per process, per (database, corpus, corpus creation time): the sums per annotator (by user
# id) and over the corpus, with the corpus's handed_in_changes mark (summed over its rows of
# figure_mark_shards) they were summed
# at (a database trigger moves it on every change of a handed-in annotation and every drop,
# return or removal of a sentence, app.counts). A view with the same mark reads those rows.
_sums: dict[tuple[str, int, object], tuple[int, dict[int, Effort], Effort]] = {}


def _handed_in_mark(db: Session, corpus_id: int) -> int | None:
    mark = db.scalar(
        select(func.sum(FigureMark.handed_in_changes)).where(FigureMark.corpus_id == corpus_id)
    )
    return None if mark is None else int(mark)


def _print_text(fp: _Fingerprint) -> str:
    """A fingerprint as stored in effort_shares."""
    head, updated_at, user_id = fp
    stamp = updated_at.isoformat() if isinstance(updated_at, datetime) else str(updated_at)
    return f"{head}|{stamp}|{user_id}"


def _part_json(part: _Part | None) -> Any:
    if part is None:
        return None
    distance = None if part.distance is None else [part.distance[0], part.distance[1]]
    return [part.n_words, part.seconds, part.actions, distance]


def _stored_parts(
    db: Session, wanted: dict[int, _Fingerprint]
) -> dict[int, tuple[_Fingerprint, _Part | None]]:
    """The stored shares of ``wanted`` (annotation id: fingerprint) whose fingerprint is
    still the annotation's."""
    out: dict[int, tuple[_Fingerprint, _Part | None]] = {}
    ids = sorted(wanted)
    for at in range(0, len(ids), 500):
        for aid, text, share in db.execute(
            select(EffortShare.annotation_id, EffortShare.fingerprint, EffortShare.share).where(
                EffortShare.annotation_id.in_(ids[at : at + 500])
            )
        ):
            if text != _print_text(wanted[aid]):
                continue
            part = None
            if share is not None:
                n_words, seconds, actions, distance = share
                part = _Part(
                    n_words=int(n_words),
                    seconds=float(seconds),
                    actions={str(k): int(n) for k, n in actions.items()},
                    distance=None if distance is None else (float(distance[0]), int(distance[1])),
                )
            out[aid] = (wanted[aid], part)
    return out


def _summed(
    db: Session, corpus_id: int, key: tuple[str, int, object] | None
) -> tuple[dict[int, Effort], Effort]:
    """The sums per user id and over the corpus, from the kept shares (see ``_parts``);
    with ``key`` None, every share computed afresh and none kept."""
    rows = db.execute(
        select(Annotation.id, Annotation.head, Annotation.updated_at, Annotation.user_id)
        .join(Sentence, Sentence.id == Annotation.sentence_id)
        .where(
            Sentence.corpus_id == corpus_id,
            Annotation.state == ANN_SUBMITTED,
            Sentence.state != SENT_DROPPED,
        )
        .order_by(Annotation.id)
    ).all()
    prints: dict[int, _Fingerprint] = {aid: (head, upd, uid) for aid, head, upd, uid in rows}
    with _parts_lock:
        known = {} if key is None else dict(_parts.get(key, {}))
    stale = [aid for aid, fp in prints.items() if aid not in known or known[aid][0] != fp]
    if key is not None and stale:  # shares a process stored (this one before, or another)
        known.update(_stored_parts(db, {aid: prints[aid] for aid in stale}))
        stale = [aid for aid in stale if aid not in known]
    fresh: dict[int, _Part | None] = {}
    if stale:
        anns = list(db.scalars(select(Annotation).where(Annotation.id.in_(stale))))
        # a row changed between the two reads is left for the next view to pick up
        got = {a.id: a for a in anns}
        fresh = _compute_parts(db, [got[a] for a in stale if a in got])
        if key is not None:
            kept_sums.store_shares(
                db, {aid: (_print_text(prints[aid]), _part_json(p)) for aid, p in fresh.items()}
            )
    merged = {
        aid: (fp, fresh[aid] if aid in fresh else known[aid][1])
        for aid, fp in prints.items()
        if aid in fresh or (aid in known and known[aid][0] == fp)
    }
    if key is not None:
        with _parts_lock:
            _parts[key] = merged
    people: dict[int, Effort] = {}
    total = Effort("all annotators")
    for fp, part in merged.values():
        if part is None:
            continue
        people.setdefault(fp[2], Effort("")).add(
            part.n_words, part.seconds, part.actions, part.distance
        )
        total.add(part.n_words, part.seconds, part.actions, part.distance)
    return people, total


def _sums_json(people: dict[int, Effort], total: Effort) -> dict[str, Any]:
    """The sums as JSON (kept_sums.sums of kind "effort")."""

    def one(e: Effort) -> list[Any]:
        return [e.sentences, e.words, e.seconds, e.actions, dict(e.by_kind)] + [
            e.compared,
            e.f1_sum,
            e.edits,
        ]

    return {"people": [[uid, one(e)] for uid, e in sorted(people.items())], "total": one(total)}


def _sums_from_json(data: dict[str, Any]) -> tuple[dict[int, Effort], Effort]:
    def one(name: str, v: list[Any]) -> Effort:
        e = Effort(name, int(v[0]), int(v[1]), float(v[2]), int(v[3]))
        e.by_kind.update({str(k): int(n) for k, n in v[4].items()})
        e.compared, e.f1_sum, e.edits = int(v[5]), float(v[6]), int(v[7])
        return e

    people = {int(uid): one("", v) for uid, v in data["people"]}
    return people, one("all annotators", data["total"])


#: kept_sums.kind of the effort sums.
KIND = "effort"


def effort_figures(db: Session, corpus_id: int) -> tuple[list[Effort], Effort]:
    """Per annotator (by name) and for the whole corpus, over handed-in annotations.

    Cost per view: one row (the corpus's figure marks) and a row per annotator when no
    handed-in annotation changed since the last view (in this process, or in any process
    that stored its sums in kept_sums: one more row); otherwise one row per handed-in
    annotation (ids, head, times), and the revisions and trees only of annotations changed
    since (in this process)."""
    key = (
        str(db.get_bind().engine.url),
        corpus_id,
        db.scalar(select(Corpus.created_at).where(Corpus.id == corpus_id)),
    )
    mark = _handed_in_mark(db, corpus_id)  # read before the rows: a change after it is seen
    with _parts_lock:  # by the next view
        kept = _sums.get(key)
    if kept is not None and mark is not None and kept[0] == mark:
        people, total = kept[1], kept[2]
    else:
        stored = None if mark is None else kept_sums.load(db, corpus_id, KIND)
        if stored is not None and stored.changes == mark:
            people, total = _sums_from_json(stored.sums)
        else:
            people, total = _summed(db, corpus_id, key)
            if mark is not None:
                kept_sums.store(db, corpus_id, KIND, mark, 0, 0, _sums_json(people, total))
        if mark is not None:
            with _parts_lock:
                _sums[key] = (mark, people, total)
    return _named(db, people), total


def _named(db: Session, people: dict[int, Effort]) -> list[Effort]:
    names = dict(db.execute(select(User.id, User.username).where(User.id.in_(people))).all())
    named = [replace(e, name=names[uid]) for uid, e in people.items() if uid in names]
    return sorted(named, key=lambda e: e.name)


def effort_afresh(db: Session, corpus_id: int) -> tuple[list[Effort], Effort]:
    """:func:`effort_figures` computed from nothing: no kept share or sum read or kept (the
    tests' reference)."""
    people, total = _summed(db, corpus_id, None)
    return _named(db, people), total


def forget_cached_parts() -> None:
    """Drop every kept share (the next view computes them all again)."""
    with _parts_lock:
        _parts.clear()
        _sums.clear()


#: The effort table's columns: (CSV header, heading on the Agreement page). The page and the
#: CSV show the same rows (:func:`effort_rows`), so their figures cannot disagree.
EFFORT_COLUMNS = [
    ("annotator", "Annotator"),
    ("sentences", "Sentences"),
    ("words", "Words"),
    ("active_seconds", "Active seconds"),
    ("sentences_per_hour", "Sentences per hour"),
    ("seconds_per_word", "Seconds per word"),
    ("actions", "Actions"),
    ("actions_per_sentence", "Actions per sentence"),
    ("compared_with_start", "Compared with the start"),
    ("mean_f1_to_start", "F1 from the start"),
    ("edits_from_start_per_sentence", "Edits from the start per sentence"),
    ("actions_by_kind", "Actions by kind"),
]


def _num(value: float | None, digits: int) -> str:
    return "" if value is None else f"{value:.{digits}f}"


def effort_rows(people: list[Effort], total: Effort) -> list[list[str]]:
    """One row of formatted figures per annotator, then the corpus (annotator "all
    annotators"), in the order of :data:`EFFORT_COLUMNS`."""
    return [
        [
            e.name,
            str(e.sentences),
            str(e.words),
            f"{e.seconds:.1f}",
            _num(e.sentences_per_hour, 2),
            _num(e.seconds_per_word, 2),
            str(e.actions),
            _num(e.actions_per_sentence, 2),
            str(e.compared),
            _num(e.start_f1, 4),
            _num(e.edits_per_sentence, 2),
            " ".join(f"{k}={n}" for k, n in sorted(e.by_kind.items())),
        ]
        for e in [*people, total]
    ]


def effort_csv(db: Session, corpus_id: int) -> str:
    """The rows of :func:`effort_rows` as CSV, headed by the keys of :data:`EFFORT_COLUMNS`."""
    people, total = effort_figures(db, corpus_id)
    out = io.StringIO()
    w = csv.writer(out, lineterminator="\n")
    w.writerow([key for key, _ in EFFORT_COLUMNS])
    for row in effort_rows(people, total):
        name = row[0]
        if name[:1] and name[0] in "=+-@":  # kept as text by a spreadsheet
            row = ["'" + name, *row[1:]]
        w.writerow(row)
    return out.getvalue()
