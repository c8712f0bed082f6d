"""The agreement log: labelled bracket agreement between the annotators of a sentence.

What it computes
    :func:`on_submitted` runs in the transaction that marks an annotation submitted. When every
    annotation the sentence waits for is submitted, it scores each pair of submitted trees with
    PARSEVAL labelled bracketing (:func:`parser.scoring.score_pair`, default conventions) and
    stores one :class:`AgreementRecord` per pair. The earlier annotation (lower id) of a pair is
    scored as "gold" and the later one as "test", so the record's precision is
    ``matched / count_b`` and its recall ``matched / count_a``; F1 does not depend on the order.

    When the sentence waits: if it has Assignment rows, it waits for every assigned annotator;
    without assignments, for ``annotators_per_sentence`` submitted annotations (corpus setting).

    Then the sentence moves on. All trees identical as bracketed trees (the same text once
    written by :func:`parser.trees.write_tree`; the scoring conventions ignore punctuation
    attachment and function tags, so "F1 = 1" is not enough to skip a human look) and the corpus
    setting ``auto_gold_when_identical`` on: the tree becomes gold with provenance
    ``agreement``. Otherwise the sentence goes to review. A single submitted annotation (a corpus
    with one annotator per sentence) has no partner, so it goes to review too: nobody has
    checked it yet. A sentence that is already gold keeps its gold; its records are still logged.

    The Agreement page's figures (:func:`corpus_figures`) are sums over the stored records,
    kept between views (in the process's memory, and in the database's ``kept_sums`` so that
    a new process starts from them, :mod:`app.services.kept_sums`) and checked against the
    corpus's change marks (the sums of its rows of ``figure_mark_shards``, kept by database
    triggers, :mod:`app.counts`): corpus labelled F1
    micro-averaged over all pairs (summed matched and constituent counts), the same per
    annotator pair, per label (from each record's ``detail["per_label"]``), the most frequent
    label confusions (``detail["confusions"]``) and F1 per day or week.

Complexity: on_submitted scores k(k-1)/2 pairs for k annotations, each O(n + g*t) (see
parser.scoring); a view of corpus_figures reads the marks row, then the records logged since
its last view (in a new process, those after the stored sums; all of them the first time
ever, or after a sentence with records was dropped, brought back or removed), O(new records
* labels) plus an index probe per new record's sentence, plus O(pairs + labels + days) to
show them and to store them, plus for a reader under the blind rule one index range of what
is hidden from them (``hidden_sentences``) and, when that changed, its records.
Limits: records are never updated; a re-submission after a reopen logs new records beside
the old ones (both stay in the log; the page counts each record once).
"""

from __future__ import annotations

import csv
import io
import threading
from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from itertools import combinations
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.models import (
    ANN_SUBMITTED,
    SENT_DROPPED,
    SENT_GOLD,
    SENT_IN_REVIEW,
    AgreementRecord,
    Annotation,
    Assignment,
    Corpus,
    Document,
    Event,
    FigureMark,
    HiddenSentence,
    Revision,
    Sentence,
    User,
)
from app.services import kept_sums
from app.services.gold import current_revision, gold_added, make_gold
from parser.scoring import Counts, label_confusions, score_pair
from parser.trees import read_tree, write_tree

# --------------------------------------------------------------------------------------------
# logging agreement when annotations are submitted


@dataclass(frozen=True)
class SubmittedTree:
    annotation: Annotation
    revision: Revision
    text: str  # canonical one-line form


def submitted_trees(db: Session, sentence: Sentence) -> list[SubmittedTree]:
    """Every submitted annotation of the sentence with its current tree, oldest first; only
    trees on the sentence's current tokens (a tree on earlier tokens is not compared)."""
    anns = db.scalars(
        select(Annotation)
        .where(Annotation.sentence_id == sentence.id, Annotation.state == ANN_SUBMITTED)
        .order_by(Annotation.id)
    ).all()
    out: list[SubmittedTree] = []
    for ann in anns:
        rev = current_revision(db, ann)
        if rev is None or rev.token_version != sentence.token_version:
            continue
        out.append(SubmittedTree(ann, rev, write_tree(read_tree(rev.tree))))
    return out


def is_complete(
    db: Session, sentence: Sentence, corpus: Corpus, submitted: Sequence[SubmittedTree]
) -> bool:
    """Whether every annotation the sentence waits for is submitted (see the module doc)."""
    assigned = set(
        db.scalars(select(Assignment.user_id).where(Assignment.sentence_id == sentence.id)).all()
    )
    done = {s.annotation.user_id for s in submitted}
    if assigned:
        return assigned <= done
    return len(done) >= corpus.options.annotators_per_sentence


def _record_exists(db: Session, a: SubmittedTree, b: SubmittedTree) -> bool:
    rows = db.scalars(
        select(AgreementRecord).where(
            AgreementRecord.annotation_a_id == a.annotation.id,
            AgreementRecord.annotation_b_id == b.annotation.id,
        )
    ).all()
    return any(
        r.detail.get("revision_a") == a.revision.id and r.detail.get("revision_b") == b.revision.id
        for r in rows
    )


def score_record(
    corpus_id: int, sentence_id: int, a: SubmittedTree, b: SubmittedTree
) -> AgreementRecord:
    """An (unsaved) agreement record of tree ``b`` scored against tree ``a``."""
    tree_a = read_tree(a.text)
    tree_b = read_tree(b.text)
    s = score_pair(tree_a, tree_b)
    confusions = label_confusions(tree_a, tree_b)
    return AgreementRecord(
        corpus_id=corpus_id,
        sentence_id=sentence_id,
        annotation_a_id=a.annotation.id,
        annotation_b_id=b.annotation.id,
        user_a_id=a.annotation.user_id,
        user_b_id=b.annotation.user_id,
        matched=s.labelled.matched,
        count_a=s.labelled.gold,
        count_b=s.labelled.test,
        labelled_precision=s.labelled.precision,
        labelled_recall=s.labelled.recall,
        labelled_f1=s.labelled.f1,
        unlabelled_f1=s.unlabelled.f1,
        pos_agreement=s.pos_accuracy,
        identical=a.text == b.text,
        detail={
            "revision_a": a.revision.id,
            "revision_b": b.revision.id,
            "unlabelled": [s.unlabelled.matched, s.unlabelled.gold, s.unlabelled.test],
            "pos": [s.pos_correct, s.pos_total],
            "crossing": s.crossing,
            "words": s.length,
            "per_label": {
                label: [c.matched, c.gold, c.test] for label, c in sorted(s.per_label.items())
            },
            "confusions": [[ga, tb, n] for (ga, tb), n in sorted(confusions.items())],
        },
    )


def on_submitted(db: Session, sentence: Sentence) -> None:
    """Log agreement and route the sentence once all its annotations are submitted.

    Called by the Bench's submit in the same transaction, after the annotation is marked
    submitted (and flushed or not: this function flushes). Does not commit.
    """
    db.flush()
    corpus = db.get(Corpus, sentence.corpus_id)
    if corpus is None:  # the corpus was deleted under us; nothing to route
        return
    submitted = submitted_trees(db, sentence)
    if not submitted or not is_complete(db, sentence, corpus, submitted):
        return
    logged = 0
    for a, b in combinations(submitted, 2):
        if _record_exists(db, a, b):
            continue
        db.add(score_record(corpus.id, sentence.id, a, b))
        logged += 1
    identical = len(submitted) > 1 and len({s.text for s in submitted}) == 1
    if sentence.state == SENT_GOLD:
        outcome = "already gold"
    elif identical and corpus.options.auto_gold_when_identical:
        make_gold(
            db,
            sentence,
            submitted[0].text,
            provenance="agreement",
            source_annotation_id=submitted[0].annotation.id,
        )
        outcome = "gold"
    else:
        sentence.state = SENT_IN_REVIEW
        outcome = "in_review"
    db.add(
        Event(
            kind="agreement.logged",
            corpus_id=corpus.id,
            sentence_id=sentence.id,
            detail={
                "pairs": logged,
                "annotations": [s.annotation.id for s in submitted],
                "outcome": outcome,
            },
        )
    )
    db.flush()
    if outcome == "gold":
        gold_added(db, corpus)


# --------------------------------------------------------------------------------------------
# figures for the Agreement page


@dataclass
class PairFigures:
    user_a: str
    user_b: str
    sentences: int = 0
    counts: Counts = field(default_factory=Counts)
    unlabelled: Counts = field(default_factory=Counts)
    pos_correct: int = 0
    pos_total: int = 0
    identical: int = 0

    @property
    def pos_agreement(self) -> float:
        return self.pos_correct / self.pos_total if self.pos_total else 1.0


@dataclass(frozen=True)
class LabelFigures:
    label: str
    counts: Counts


@dataclass(frozen=True)
class PeriodFigures:
    start: datetime
    records: int
    counts: Counts


@dataclass
class CorpusAgreement:
    records: int
    sentences: int
    counts: Counts
    unlabelled: Counts
    pos_correct: int
    pos_total: int
    identical: int
    pairs: list[PairFigures]
    labels: list[LabelFigures]  # worst F1 first
    confusions: list[tuple[str, str, int]]  # most frequent first
    periods: list[PeriodFigures]  # by day, or by week when the log spans many days
    period: str  # "day" or "week"

    @property
    def pos_agreement(self) -> float:
        return self.pos_correct / self.pos_total if self.pos_total else 1.0


def _triple(v: object) -> Counts:
    if isinstance(v, list | tuple) and len(v) == 3:
        return Counts(int(v[0]), int(v[1]), int(v[2]))
    return Counts()


#: More days than this with records: the timeline counts weeks instead of days.
MAX_DAYS_SHOWN = 31


def day_start(at: datetime) -> datetime:
    return at.replace(hour=0, minute=0, second=0, microsecond=0)


def week_start(at: datetime) -> datetime:
    """Monday 00:00 of ``at``'s week."""
    return day_start(at - timedelta(days=at.weekday()))


def timeline(days: dict[datetime, list[Counts]]) -> tuple[str, list[PeriodFigures]]:
    """Records per day, or per week when more than MAX_DAYS_SHOWN days have records."""
    return timeline_of_sums({day: (len(cs), sum(cs, Counts())) for day, cs in days.items()})


def timeline_of_sums(days: dict[datetime, tuple[int, Counts]]) -> tuple[str, list[PeriodFigures]]:
    """:func:`timeline` from each day's (records, summed counts)."""
    if len(days) <= MAX_DAYS_SHOWN:
        return "day", [PeriodFigures(at, n, c) for at, (n, c) in sorted(days.items())]
    weeks: dict[datetime, tuple[int, Counts]] = {}
    for day, (n, c) in days.items():
        had_n, had_c = weeks.get(week_start(day), (0, Counts()))
        weeks[week_start(day)] = (had_n + n, had_c + c)
    return "week", [PeriodFigures(at, n, c) for at, (n, c) in sorted(weeks.items())]


def _minus(a: Counts, b: Counts) -> Counts:
    return Counts(a.matched - b.matched, a.gold - b.gold, a.test - b.test)


@dataclass
class _Tally:
    """Running sums of a corpus's agreement records (what :func:`corpus_figures` shows);
    ``add`` takes one record, ``figures`` reads the sums without touching the records.

    ``seen`` and ``changes`` say what the sums are current for: ``seen`` records of the
    corpus read (those of dropped sentences too, which are not summed), every id up to
    ``last_id``, when the corpus's summed ``agreement_changes`` mark stood at ``changes``.
    Sentences are counted, not listed (``sentences``, and ``PairFigures.sentences`` per
    pair): whether a record's sentence is new to the sums is asked of the records before
    ``last_id`` (:func:`_extend`), so the sums stay as small as the pairs, labels and days."""

    last_id: int = 0
    records: int = 0
    total: Counts = field(default_factory=Counts)
    unlabelled: Counts = field(default_factory=Counts)
    pos_correct: int = 0
    pos_total: int = 0
    identical: int = 0
    sentences: int = 0
    pairs: dict[tuple[int, int], PairFigures] = field(default_factory=dict)
    labels: dict[str, Counts] = field(default_factory=dict)
    confusions: Counter[tuple[str, str]] = field(default_factory=Counter)
    days: dict[datetime, tuple[int, Counts]] = field(default_factory=dict)
    seen: int = 0
    changes: int | None = None
    # the sums of hidden sentences (blind rule) by (last_id, hidden sentence ids): readers
    # whose hidden set has not changed since their last view reuse them (in memory only)
    hidden_sums: dict[tuple[int, frozenset[int]], _Tally] = field(default_factory=dict)

    def add(self, r: Any, new_sentence: bool, new_pair: bool) -> None:
        """Add one record (a row of its summed columns); ``new_sentence``: the first record
        of its sentence in these sums, ``new_pair``: the first of its sentence and pair."""
        c = Counts(r.matched, r.count_a, r.count_b)
        u = _triple(r.detail.get("unlabelled"))
        pos = r.detail.get("pos") or [0, 0]
        self.last_id = max(self.last_id, r.id)
        self.records += 1
        self.sentences += new_sentence
        self.total += c
        self.unlabelled += u
        self.pos_correct += int(pos[0])
        self.pos_total += int(pos[1])
        self.identical += bool(r.identical)
        pf = self.pairs.get(_pair_key(r))
        if pf is None:
            pf = self.pairs[_pair_key(r)] = PairFigures("?", "?")
        pf.sentences += new_pair
        pf.counts += c
        pf.unlabelled += u
        pf.pos_correct += int(pos[0])
        pf.pos_total += int(pos[1])
        pf.identical += bool(r.identical)
        for label, v in (r.detail.get("per_label") or {}).items():
            self.labels[label] = self.labels.get(label, Counts()) + _triple(v)
        for ga, tb, n in r.detail.get("confusions") or []:
            # a confusion is unordered between two annotators: NP/QP is QP/NP
            self.confusions[tuple(sorted((str(ga), str(tb))))] += int(n)  # type: ignore[index]
        n, summed = self.days.get(day_start(r.created_at), (0, Counts()))
        self.days[day_start(r.created_at)] = (n + 1, summed + c)

    def figures(
        self, names: dict[int, str], top_confusions: int, minus: _Tally | None = None
    ) -> CorpusAgreement:
        """The figures of these sums, less the sums ``minus`` holds (records of whole
        sentences that are among these: a pair, a label or a day left with nothing is not
        shown)."""
        m = minus or _Tally()
        pairs = []
        for key, pf in self.pairs.items():
            less = m.pairs.get(key) or PairFigures("?", "?")
            sentences = pf.sentences - less.sentences
            if sentences <= 0:
                continue
            pairs.append(
                PairFigures(
                    names.get(key[0], "?"),
                    names.get(key[1], "?"),
                    sentences=sentences,
                    counts=_minus(pf.counts, less.counts),
                    unlabelled=_minus(pf.unlabelled, less.unlabelled),
                    pos_correct=pf.pos_correct - less.pos_correct,
                    pos_total=pf.pos_total - less.pos_total,
                    identical=pf.identical - less.identical,
                )
            )
        labels = {k: _minus(v, m.labels.get(k, Counts())) for k, v in self.labels.items()}
        label_rows = sorted(
            (LabelFigures(k, v) for k, v in labels.items() if v != Counts()),
            key=lambda lf: (lf.counts.f1, -(lf.counts.gold + lf.counts.test), lf.label),
        )
        days = {}
        for day, (n, c) in self.days.items():
            less_n, less_c = m.days.get(day, (0, Counts()))
            if n > less_n:
                days[day] = (n - less_n, _minus(c, less_c))
        period, period_rows = timeline_of_sums(days)
        return CorpusAgreement(
            records=self.records - m.records,
            sentences=self.sentences - m.sentences,
            counts=_minus(self.total, m.total),
            unlabelled=_minus(self.unlabelled, m.unlabelled),
            pos_correct=self.pos_correct - m.pos_correct,
            pos_total=self.pos_total - m.pos_total,
            identical=self.identical - m.identical,
            pairs=sorted(pairs, key=lambda p: (p.user_a, p.user_b)),
            labels=label_rows,
            confusions=sorted(  # most frequent first, ties by name (whatever order summed)
                ((a, b, n) for (a, b), n in (self.confusions - m.confusions).items()),
                key=lambda c: (-c[2], c[0], c[1]),
            )[:top_confusions],
            periods=period_rows,
            period=period,
        )

    def to_json(self) -> dict[str, Any]:
        """The sums as JSON (what ``kept_sums.sums`` stores)."""

        def c3(c: Counts) -> list[int]:
            return [c.matched, c.gold, c.test]

        return {
            "records": self.records,
            "total": c3(self.total),
            "unlabelled": c3(self.unlabelled),
            "pos": [self.pos_correct, self.pos_total],
            "identical": self.identical,
            "sentences": self.sentences,
            "pairs": [
                [a, b, p.sentences, c3(p.counts), c3(p.unlabelled)]
                + [p.pos_correct, p.pos_total, p.identical]
                for (a, b), p in sorted(self.pairs.items())
            ],
            "labels": {k: c3(v) for k, v in sorted(self.labels.items())},
            "confusions": [[a, b, n] for (a, b), n in sorted(self.confusions.items())],
            "days": [[d.isoformat(), n, c3(c)] for d, (n, c) in sorted(self.days.items())],
        }

    @classmethod
    def from_json(cls, data: dict[str, Any], last_id: int, seen: int, changes: int) -> _Tally:
        """Sums stored by :meth:`to_json`, current for ``last_id``, ``seen`` and ``changes``."""
        tally = cls(last_id=last_id, seen=seen, changes=changes)
        tally.records = int(data["records"])
        tally.total = _triple(data["total"])
        tally.unlabelled = _triple(data["unlabelled"])
        tally.pos_correct, tally.pos_total = (int(v) for v in data["pos"])
        tally.identical = int(data["identical"])
        tally.sentences = int(data["sentences"])
        for a, b, sentences, counts, unlabelled, pos_c, pos_t, identical in data["pairs"]:
            tally.pairs[(int(a), int(b))] = PairFigures(
                "?",
                "?",
                sentences=int(sentences),
                counts=_triple(counts),
                unlabelled=_triple(unlabelled),
                pos_correct=int(pos_c),
                pos_total=int(pos_t),
                identical=int(identical),
            )
        tally.labels = {str(k): _triple(v) for k, v in data["labels"].items()}
        tally.confusions = Counter({(str(a), str(b)): int(n) for a, b, n in data["confusions"]})
        tally.days = {datetime.fromisoformat(d): (int(n), _triple(c)) for d, n, c in data["days"]}
        return tally


def _pair_key(r: Any) -> tuple[int, int]:
    """A record's pair of annotators, in either order."""
    return (min(r.user_a_id, r.user_b_id), max(r.user_a_id, r.user_b_id))


# Per process, per (database, corpus, corpus creation time): the sums so far, and in the
# database (``kept_sums``, kind "agreement") the latest sums any process made, so that a new
# process starts from them. The corpus's figure marks (the sums of its rows of
# figure_mark_shards, kept by database triggers,
# app.counts) counts its records and every change other than a record logged (a record
# removed, a sentence dropped, brought back or removed). A view reads those rows: the same
# marks, the sums are current and no record is read; more records and no other change, the
# records logged since are read and added; any other change (or records missing, one
# committed late with a lower id), all are summed again. Sums made or brought up to date by a
# view are written back to kept_sums when they are newer than what is stored there.
_tallies: dict[tuple[str, int, datetime | None], _Tally] = {}
#: Hidden-sentence sums kept per corpus (one per reader under the blind rule, at most).
HIDDEN_SUMS_KEPT = 32
_tally_lock = threading.Lock()
#: kept_sums.kind of the agreement sums.
KIND = "agreement"


def hidden_from(db: Session, corpus_id: int, viewer: User | None) -> set[int]:
    """The sentences of the corpus with agreement records that ``viewer`` still annotates
    (the blind rule of :mod:`app.services.blind`): their records are left out of everything
    the viewer sees of the log, rows and sums alike. None (the command line) sees all.

    Cost: one index range of the viewer's own rows of ``hidden_sentences`` (kept by database
    triggers, :mod:`app.counts`): O(what is hidden from them), whatever the size of their
    queue or of the corpus's log."""
    if viewer is None:
        return set()
    return set(
        db.scalars(
            select(HiddenSentence.sentence_id).where(
                HiddenSentence.user_id == viewer.id, HiddenSentence.corpus_id == corpus_id
            )
        )
    )


def _marks(db: Session, corpus_id: int) -> tuple[int, int] | None:
    """(agreement records, other changes) of the corpus's figure marks (the sums of its
    rows); None without a row."""
    row = db.execute(
        select(
            func.sum(FigureMark.agreement_records), func.sum(FigureMark.agreement_changes)
        ).where(FigureMark.corpus_id == corpus_id)
    ).one()
    return None if row[0] is None else (int(row[0]), int(row[1]))


#: The columns of a record the sums read (rows with these attributes, not whole records:
#: a first view reads every record of the corpus).
_SUMMED = (
    AgreementRecord.id,
    AgreementRecord.sentence_id,
    AgreementRecord.user_a_id,
    AgreementRecord.user_b_id,
    AgreementRecord.matched,
    AgreementRecord.count_a,
    AgreementRecord.count_b,
    AgreementRecord.identical,
    AgreementRecord.detail,
    AgreementRecord.created_at,
)


def _read_records(db: Session, corpus_id: int, after: int) -> list[tuple[Any, str]]:
    """The corpus's records with an id above ``after`` (the summed columns) and their
    sentences' states."""
    return [
        (row, row.state)
        for row in db.execute(
            select(*_SUMMED, Sentence.state)
            .join(Sentence, Sentence.id == AgreementRecord.sentence_id)
            .where(AgreementRecord.corpus_id == corpus_id, AgreementRecord.id > after)
            .order_by(AgreementRecord.id)
        ).all()
    ]


def _sum_into(
    tally: _Tally,
    rows: Iterable[Any],
    sentences: set[int],
    pairs: set[tuple[int, tuple[int, int]]],
) -> None:
    """Add ``rows`` to ``tally``; ``sentences`` and ``pairs`` (sentence, pair) are those
    the tally has records of already (both grow as rows are added)."""
    for r in rows:
        pair = (r.sentence_id, _pair_key(r))
        tally.add(r, r.sentence_id not in sentences, pair not in pairs)
        sentences.add(r.sentence_id)
        pairs.add(pair)


def _extend(db: Session, corpus_id: int, tally: _Tally, rows: list[tuple[Any, str]]) -> None:
    """Add the records of sentences not dropped; count every record read. Whether a
    record's sentence (and its pair on that sentence) is already in the sums is asked of
    the records up to ``tally.last_id`` (an index probe per new sentence): with the same
    change mark, no sentence moved to or from dropped since they were summed."""
    summed = [r for r, state in rows if state != SENT_DROPPED]
    sentences: set[int] = set()
    pairs: set[tuple[int, tuple[int, int]]] = set()
    if tally.last_id and summed:
        ids = sorted({r.sentence_id for r in summed})
        for at in range(0, len(ids), 500):  # a bounded list of parameters per query
            for old in db.execute(
                select(
                    AgreementRecord.sentence_id,
                    AgreementRecord.user_a_id,
                    AgreementRecord.user_b_id,
                ).where(
                    AgreementRecord.sentence_id.in_(ids[at : at + 500]),
                    AgreementRecord.corpus_id == corpus_id,
                    AgreementRecord.id <= tally.last_id,
                )
            ):
                sentences.add(old.sentence_id)
                pairs.add((old.sentence_id, _pair_key(old)))
    _sum_into(tally, summed, sentences, pairs)
    for r, _ in rows:
        tally.last_id = max(tally.last_id, r.id)
    tally.seen += len(rows)


def summed_afresh(db: Session, corpus_id: int) -> _Tally:
    """Every record of the corpus summed from nothing, without the kept sums (what a view
    falls back to, and the tests' reference)."""
    marks = _marks(db, corpus_id)
    tally = _Tally(changes=None if marks is None else marks[1])
    _extend(db, corpus_id, tally, _read_records(db, corpus_id, 0))
    return tally


def figures_afresh(db: Session, corpus_id: int, *, top_confusions: int = 15) -> CorpusAgreement:
    """:func:`corpus_figures` for a reader who sees everything, summed from nothing."""
    tally = summed_afresh(db, corpus_id)
    names = _user_names(db, {u for pair in tally.pairs for u in pair})
    return tally.figures(names, top_confusions)


def _kept(db: Session, corpus_id: int, changes: int) -> _Tally | None:
    """The sums stored in ``kept_sums`` when they were made at the mark ``changes``."""
    row = kept_sums.load(db, corpus_id, KIND)
    if row is None or row.changes != changes:
        return None
    return _Tally.from_json(row.sums, row.last_id, row.seen, row.changes)


def _current_tally(db: Session, corpus_id: int) -> _Tally:
    """The corpus's sums, brought up to date (see ``_tallies``). Call with the lock held."""
    # the corpus's creation time is in the key: ids can come back (a corpus removed and
    # another made in its place, a database emptied), and old sums must never be reused
    # (kept_sums rows go with their corpus)
    key = (
        str(db.get_bind().engine.url),
        corpus_id,
        db.scalar(select(Corpus.created_at).where(Corpus.id == corpus_id)),
    )
    marks = _marks(db, corpus_id)
    tally = _tallies.get(key)
    if marks is not None and (tally is None or tally.changes != marks[1] or tally.seen != marks[0]):
        # not current here: the sums another process (or an earlier one) kept may be
        kept = _kept(db, corpus_id, marks[1])
        if kept is not None and (
            tally is None or tally.changes != marks[1] or kept.seen > tally.seen
        ):
            tally = _tallies[key] = kept
    if tally is not None and marks is not None and tally.changes == marks[1]:
        if tally.seen == marks[0]:
            return tally
        if tally.seen < marks[0]:
            _extend(db, corpus_id, tally, _read_records(db, corpus_id, tally.last_id))
            if tally.seen >= marks[0]:  # more: logged since the marks were read
                _keep(db, corpus_id, tally)
                return tally
    # a first view, another kind of change, or a record committed late: sum them all
    tally = summed_afresh(db, corpus_id)
    _tallies[key] = tally
    _keep(db, corpus_id, tally)
    return tally


def _keep(db: Session, corpus_id: int, tally: _Tally) -> None:
    """Store ``tally`` in kept_sums unless what is there is as new (see kept_sums.store)."""
    if tally.changes is not None:
        kept_sums.store(
            db, corpus_id, KIND, tally.changes, tally.seen, tally.last_id, tally.to_json()
        )


def forget_kept_in_memory() -> None:
    """Drop this process's sums (the next view starts from kept_sums, as a new process)."""
    with _tally_lock:
        _tallies.clear()


def corpus_figures(
    db: Session, corpus_id: int, *, top_confusions: int = 15, viewer: User | None = None
) -> CorpusAgreement:
    """The Agreement page's figures: sums over every agreement record of the corpus (those
    of dropped sentences left out), kept between views and in the database; a view with
    nothing logged since reads one row (the corpus's figure marks), otherwise the records
    logged since (and, in a new process, the stored sums first).

    Blind rule: for a ``viewer`` who still annotates a sentence with records, that
    sentence's records are summed apart and taken off the figures, so no sum (a pair seen on
    one sentence, a day with one record, a label met once) can give that sentence away. The
    hidden sums are kept beside the sums for the same hidden set (and records), so a reader's
    next view costs the query of what is hidden from them, not its records again."""
    hidden = hidden_from(db, corpus_id, viewer)
    with _tally_lock:  # held while adding: the sums are shared by every request
        tally = _current_tally(db, corpus_id)
        less = None
        ids = frozenset(hidden)
        if ids:
            less = tally.hidden_sums.get((tally.last_id, ids))
        if ids and less is None:
            less = _Tally()
            ordered = sorted(ids)
            sentences: set[int] = set()
            pairs: set[tuple[int, tuple[int, int]]] = set()
            for at in range(0, len(ordered), 500):  # a bounded list of parameters per query
                _sum_into(
                    less,
                    db.execute(
                        select(*_SUMMED)
                        .join(Sentence, Sentence.id == AgreementRecord.sentence_id)
                        .where(
                            AgreementRecord.sentence_id.in_(ordered[at : at + 500]),
                            AgreementRecord.corpus_id == corpus_id,
                            AgreementRecord.id <= tally.last_id,
                            Sentence.state != SENT_DROPPED,
                        )
                    ),
                    sentences,
                    pairs,
                )
            while len(tally.hidden_sums) >= HIDDEN_SUMS_KEPT:  # the oldest goes
                tally.hidden_sums.pop(next(iter(tally.hidden_sums)))
            tally.hidden_sums[(tally.last_id, ids)] = less
        names = _user_names(db, {u for pair in tally.pairs for u in pair})
        return tally.figures(names, top_confusions, minus=less)


def _user_names(db: Session, ids: Iterable[int]) -> dict[int, str]:
    wanted = list(ids)
    if not wanted:
        return {}
    return {
        u.id: u.display_name or u.username
        for u in db.scalars(select(User).where(User.id.in_(wanted))).all()
    }


CSV_COLUMNS = (
    "record_id",
    "logged_at",
    "sentence_id",
    "document",
    "position",
    "annotator_a",
    "annotator_b",
    "annotation_a_id",
    "annotation_b_id",
    "matched",
    "count_a",
    "count_b",
    "labelled_precision",
    "labelled_recall",
    "labelled_f1",
    "unlabelled_f1",
    "pos_agreement",
    "crossing",
    "identical",
)


def agreement_csv(db: Session, corpus_id: int, viewer: User | None = None) -> str:
    """The corpus's agreement log as CSV (one row per record, oldest first), without the
    rows of sentences ``viewer`` still annotates (:func:`hidden_from`)."""
    hidden = hidden_from(db, corpus_id, viewer)
    rows = db.execute(
        select(AgreementRecord, Sentence.position, Document.name)
        .join(Sentence, Sentence.id == AgreementRecord.sentence_id)
        .join(Document, Document.id == Sentence.document_id)
        .where(
            AgreementRecord.corpus_id == corpus_id,
            Sentence.state != SENT_DROPPED,
            AgreementRecord.sentence_id.not_in(hidden),
        )
        .order_by(AgreementRecord.created_at, AgreementRecord.id)
    ).all()
    names = _user_names(db, {r.user_a_id for r, _, _ in rows} | {r.user_b_id for r, _, _ in rows})
    out = io.StringIO()
    w = csv.writer(out, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for r, position, doc in rows:
        w.writerow(
            [
                r.id,
                r.created_at.isoformat(timespec="seconds"),
                r.sentence_id,
                _csv_safe(doc),
                position,
                _csv_safe(names.get(r.user_a_id, "")),
                _csv_safe(names.get(r.user_b_id, "")),
                r.annotation_a_id,
                r.annotation_b_id,
                r.matched,
                r.count_a,
                r.count_b,
                f"{r.labelled_precision:.4f}",
                f"{r.labelled_recall:.4f}",
                f"{r.labelled_f1:.4f}",
                f"{r.unlabelled_f1:.4f}",
                f"{r.pos_agreement:.4f}",
                r.detail.get("crossing", ""),
                int(r.identical),
            ]
        )
    return out.getvalue()


def _csv_safe(text: str) -> str:
    """Defuse spreadsheet formulas in user-chosen names (a leading = + - @ becomes text)."""
    return "'" + text if text[:1] in ("=", "+", "-", "@") else text
