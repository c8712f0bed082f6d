"""Review: the sentences waiting for an adjudicator, one sentence's trees side by side, settle.

What it computes
    * :func:`review_list`: the sentences of a corpus waiting in review (oldest first, with the
      lowest labelled F1 among their agreement records) and the latest gold decisions.
    * :func:`review_detail`: everything the Review page of one sentence shows: each submitted
      tree with its annotator, the agreement records of those trees, the gold history and the
      *combined view*: every span any annotator bracketed, grouped by span, each label with the
      annotators that gave it, classified as

      - ``all``: every annotator has the span with the same label(s);
      - ``split``: every annotator has the span but the labels differ;
      - ``some``: only some annotators have the span.

      Labels are compared as written (function tags included), because the adjudicator decides
      the final labels; the outermost ROOT/TOP/empty wrapper is left out.
    * :func:`settle`: the adjudicator's tree (validated like a Bench save) becomes gold with
      provenance ``adjudication``: who, from which annotation or earlier gold it started, when,
      and an optional note. The sentence must be in review; a compare-and-set on its state makes
      a second, racing settle fail with 409 instead of writing two gold trees. An adjudicator
      who submitted an annotation of the sentence settles it only as the corpus setting
      ``settle_own_annotation`` allows (``if_alone`` by default: only when no other active
      adjudicator or admin exists); when allowed, the gold row records it.
    * Every gold row keeps the annotators' notes for the adjudicator as they were when it was
      made (:func:`app.services.gold.annotator_notes`); the Review page shows each note beside
      its tree.
    * Making, retiring and reopening gold rows is :mod:`app.services.gold`'s.

Nothing is ever deleted: every gold tree stays as a row, the newest unretired one is current.

Complexity: a detail view reads the sentence's annotations, their head revisions, records and
gold rows (a handful each) and compares O(k * c) constituents for k trees of c constituents.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field
from typing import Any, cast

from nltk import Tree
from sqlalchemy import CursorResult, func, select, update
from sqlalchemy.orm import Session

from app.corpus_settings import SettleOwnPolicy
from app.models import (
    ANN_SUBMITTED,
    ROLE_ADJUDICATOR,
    ROLE_ADMIN,
    SENT_GOLD,
    SENT_IN_REVIEW,
    AgreementRecord,
    Annotation,
    Corpus,
    Document,
    Event,
    Gold,
    Sentence,
    User,
)
from app.schemas.common import UtcDateTime
from app.services.blind import ensure_not_blind
from app.services.errors import BadInput, Conflict, Forbidden, NotFound
from app.services.gold import check_note, current_revision, gold_added, make_gold
from app.services.validation import validate_tree_text
from parser.trees import constituents, is_preterminal, read_tree, words, write_tree

WRAPPER_LABELS = frozenset({"", "ROOT", "TOP"})
#: Letters that stand for the annotators of one sentence on the Review page (A, B, C...).
LETTERS = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"


# --------------------------------------------------------------------------------------------
# the list


@dataclass(frozen=True)
class WaitingRow:
    sentence_id: int
    corpus_id: int
    document: str
    position: int
    text: str
    annotators: list[str]
    lowest_f1: float | None
    since: UtcDateTime | None


@dataclass(frozen=True)
class SettledRow:
    gold_id: int
    sentence_id: int
    corpus_id: int
    document: str
    position: int
    text: str
    provenance: str
    adjudicator: str | None
    note: str
    at: UtcDateTime
    current: bool


@dataclass
class ReviewList:
    waiting: list[WaitingRow]
    settled: list[SettledRow]


def review_list(
    db: Session, corpus_id: int | None = None, *, settled_limit: int = 25, waiting_limit: int = 500
) -> ReviewList:
    """Sentences waiting in review (longest waiting first) and the latest gold decisions."""
    where = [Sentence.state == SENT_IN_REVIEW]
    if corpus_id is not None:
        where.append(Sentence.corpus_id == corpus_id)
    last_sub = (
        select(Annotation.sentence_id, func.max(Annotation.submitted_at).label("at"))
        .where(Annotation.state == ANN_SUBMITTED)
        .group_by(Annotation.sentence_id)
        .subquery()
    )
    rows = db.execute(
        select(Sentence, Document.name, last_sub.c.at)
        .join(Document, Document.id == Sentence.document_id)
        .outerjoin(last_sub, last_sub.c.sentence_id == Sentence.id)
        .where(*where)
        .order_by(last_sub.c.at, Sentence.id)
        .limit(waiting_limit)
    ).all()
    ids = [s.id for s, _, _ in rows]
    lowest: dict[int, float] = {}
    annotators: dict[int, set[str]] = defaultdict(set)
    if ids:
        for sid, f1 in db.execute(
            select(AgreementRecord.sentence_id, func.min(AgreementRecord.labelled_f1))
            .where(AgreementRecord.sentence_id.in_(ids))
            .group_by(AgreementRecord.sentence_id)
        ):
            lowest[sid] = f1
        for sid, uname, dname in db.execute(
            select(Annotation.sentence_id, User.username, User.display_name)
            .join(User, User.id == Annotation.user_id)
            .where(Annotation.sentence_id.in_(ids), Annotation.state == ANN_SUBMITTED)
        ):
            annotators[sid].add(dname or uname)
    waiting = [
        WaitingRow(
            s.id,
            s.corpus_id,
            doc,
            s.position,
            s.text,
            sorted(annotators[s.id]),
            lowest.get(s.id),
            at,
        )
        for s, doc, at in rows
    ]
    g_where = [] if corpus_id is None else [Sentence.corpus_id == corpus_id]
    grows = db.execute(
        select(Gold, Sentence, Document.name, User.username, User.display_name)
        .join(Sentence, Sentence.id == Gold.sentence_id)
        .join(Document, Document.id == Sentence.document_id)
        .outerjoin(User, User.id == Gold.adjudicator_id)
        .where(Gold.provenance != "import", *g_where)
        .order_by(Gold.created_at.desc(), Gold.id.desc())
        .limit(settled_limit)
    ).all()
    settled = [
        SettledRow(
            g.id,
            s.id,
            s.corpus_id,
            doc,
            s.position,
            s.text,
            g.provenance,
            (dn or un) if un else None,
            g.note,
            g.created_at,
            g.retired_at is None,
        )
        for g, s, doc, un, dn in grows
    ]
    return ReviewList(waiting, settled)


# --------------------------------------------------------------------------------------------
# one sentence


@dataclass(frozen=True)
class ReviewTree:
    letter: str
    annotation_id: int
    user_id: int
    annotator: str
    revision: int
    tree: str
    submitted_at: UtcDateTime | None
    note: str = ""  # the annotator's note for the adjudicator


@dataclass(frozen=True)
class SpanLabel:
    label: str
    owners: list[str]  # annotator letters


@dataclass(frozen=True)
class CombinedSpan:
    start: int
    end: int
    kind: str  # all | split | some
    labels: list[SpanLabel]


@dataclass(frozen=True)
class GoldEntry:
    gold_id: int
    tree: str
    provenance: str
    adjudicator: str | None
    source_annotation_id: int | None
    source_letter: str | None
    note: str
    created_at: UtcDateTime
    retired_at: UtcDateTime | None
    retired_by: str | None
    annotator_notes: list[dict[str, Any]] = field(default_factory=list)
    own_annotation: bool = False


@dataclass(frozen=True)
class PairRow:
    letter_a: str
    letter_b: str
    labelled_f1: float
    unlabelled_f1: float
    pos_agreement: float
    matched: int
    count_a: int
    count_b: int


@dataclass
class ReviewDetail:
    sentence: Sentence
    corpus: Corpus
    document: str
    words: list[str]
    trees: list[ReviewTree]
    combined: list[CombinedSpan]
    pairs: list[PairRow]
    history: list[GoldEntry]  # newest first
    neighbours: tuple[int | None, int | None] = field(default=(None, None))

    @property
    def current_gold(self) -> GoldEntry | None:
        return next((g for g in self.history if g.retired_at is None), None)


def _names(db: Session, ids: set[int]) -> dict[int, str]:
    if not ids:
        return {}
    return {
        u.id: u.display_name or u.username
        for u in db.scalars(select(User).where(User.id.in_(ids))).all()
    }


def counted_constituents(text: str) -> list[tuple[str, int, int]]:
    """The constituents of a tree as the combined view compares them: the outermost
    ROOT/TOP/empty wrapper (and a wrapper directly under it) left out."""
    tree = read_tree(text)
    found = constituents(tree)
    skip = 0
    node = tree
    while not is_preterminal(node) and node.label() in WRAPPER_LABELS:
        skip += 1  # pre-order: the wrappers come first
        if len(node) != 1 or not isinstance(node[0], Tree):
            break
        node = node[0]
    return found[skip:]


def combine(trees: list[ReviewTree]) -> list[CombinedSpan]:
    """Group the constituents of all trees by span (see the module docstring)."""
    letters = [t.letter for t in trees]
    by_span: dict[tuple[int, int], dict[str, set[str]]] = defaultdict(lambda: defaultdict(set))
    for t in trees:
        for label, start, end in counted_constituents(t.tree):
            by_span[(start, end)][label].add(t.letter)
    out: list[CombinedSpan] = []
    everyone = set(letters)
    for (start, end), labels in sorted(by_span.items(), key=lambda kv: (kv[0][0], -kv[0][1])):
        holders = set().union(*labels.values())
        if holders != everyone:
            kind = "some"
        elif all(owners == everyone for owners in labels.values()):
            kind = "all"
        else:
            kind = "split"
        out.append(
            CombinedSpan(
                start,
                end,
                kind,
                [SpanLabel(label, sorted(owners)) for label, owners in sorted(labels.items())],
            )
        )
    return out


def review_detail(db: Session, sentence_id: int, viewer: User | None) -> ReviewDetail:
    """Everything the Review shows of a sentence, for ``viewer`` (None: the command line).
    Forbidden while the viewer still annotates the sentence (app.services.blind)."""
    sentence = db.get(Sentence, sentence_id)
    if sentence is None:
        raise NotFound(f"no sentence with id {sentence_id}")
    if viewer is not None:
        ensure_not_blind(db, sentence.id, viewer)
    corpus = db.get(Corpus, sentence.corpus_id)
    document = db.get(Document, sentence.document_id)
    assert corpus is not None and document is not None  # foreign keys guarantee both
    anns = db.scalars(
        select(Annotation)
        .where(Annotation.sentence_id == sentence.id, Annotation.state == ANN_SUBMITTED)
        .order_by(Annotation.id)
    ).all()
    golds = db.scalars(
        select(Gold)
        .where(Gold.sentence_id == sentence.id)
        .order_by(Gold.created_at.desc(), Gold.id.desc())
    ).all()
    names = _names(
        db,
        {a.user_id for a in anns}
        | {g.adjudicator_id for g in golds if g.adjudicator_id}
        | {g.retired_by_id for g in golds if g.retired_by_id},
    )
    trees: list[ReviewTree] = []
    for ann in anns:
        rev = current_revision(db, ann)
        if rev is None:
            continue
        letter = LETTERS[len(trees) % len(LETTERS)]
        trees.append(
            ReviewTree(
                letter,
                ann.id,
                ann.user_id,
                names.get(ann.user_id, "?"),
                rev.number,
                write_tree(read_tree(rev.tree)),
                ann.submitted_at,
                (ann.comment or "").strip(),
            )
        )
    letter_of = {t.annotation_id: t.letter for t in trees}
    pairs = []
    if trees:
        recs = db.scalars(
            select(AgreementRecord)
            .where(AgreementRecord.sentence_id == sentence.id)
            .order_by(AgreementRecord.id)
        ).all()
        latest: dict[tuple[int, int], AgreementRecord] = {}
        for r in recs:
            latest[(r.annotation_a_id, r.annotation_b_id)] = r
        for (a, b), r in latest.items():
            if a in letter_of and b in letter_of:
                pairs.append(
                    PairRow(
                        letter_of[a],
                        letter_of[b],
                        r.labelled_f1,
                        r.unlabelled_f1,
                        r.pos_agreement,
                        r.matched,
                        r.count_a,
                        r.count_b,
                    )
                )
    history = [
        GoldEntry(
            g.id,
            g.tree,
            g.provenance,
            names.get(g.adjudicator_id or -1),
            g.source_annotation_id,
            letter_of.get(g.source_annotation_id or -1),
            g.note,
            g.created_at,
            g.retired_at,
            names.get(g.retired_by_id or -1),
            list(g.annotator_notes or []),
            bool(g.own_annotation),
        )
        for g in golds
    ]
    token_words = words(read_tree(trees[0].tree)) if trees else [str(t) for t in sentence.tokens]
    return ReviewDetail(
        sentence=sentence,
        corpus=corpus,
        document=document.name,
        words=token_words,
        trees=trees,
        combined=combine(trees),
        pairs=pairs,
        history=history,
        neighbours=_neighbours(db, sentence),
    )


def _neighbours(db: Session, sentence: Sentence) -> tuple[int | None, int | None]:
    """The previous and next sentence in review in the same corpus (by id)."""
    base = select(Sentence.id).where(
        Sentence.corpus_id == sentence.corpus_id, Sentence.state == SENT_IN_REVIEW
    )
    prev = db.scalar(base.where(Sentence.id < sentence.id).order_by(Sentence.id.desc()).limit(1))
    nxt = db.scalar(base.where(Sentence.id > sentence.id).order_by(Sentence.id).limit(1))
    return prev, nxt


# --------------------------------------------------------------------------------------------
# settling and reopening


def own_submitted_annotation(db: Session, sentence_id: int, user: User) -> int | None:
    """The id of ``user``'s submitted annotation of the sentence, if any."""
    return db.scalar(
        select(Annotation.id).where(
            Annotation.sentence_id == sentence_id,
            Annotation.user_id == user.id,
            Annotation.state == ANN_SUBMITTED,
        )
    )


def other_adjudicators(db: Session, user: User) -> int:
    """How many other active accounts may adjudicate."""
    return (
        db.scalar(
            select(func.count())
            .select_from(User)
            .where(
                User.id != user.id,
                User.active.is_(True),
                User.role.in_((ROLE_ADMIN, ROLE_ADJUDICATOR)),
            )
        )
        or 0
    )


def check_own_settle(db: Session, corpus: Corpus, sentence_id: int, user: User) -> bool:
    """Raise Forbidden when the corpus's ``settle_own_annotation`` setting does not let
    ``user`` settle this sentence; return whether ``user`` annotated it."""
    if own_submitted_annotation(db, sentence_id, user) is None:
        return False
    policy = corpus.options.settle_own_annotation
    if policy == SettleOwnPolicy.ALWAYS:
        return True
    if policy == SettleOwnPolicy.NEVER:
        raise Forbidden(
            "you annotated this sentence, and this corpus lets nobody settle a "
            "sentence they annotated: another adjudicator settles it",
            kind="own_annotation",
        )
    others = other_adjudicators(db, user)
    if others:
        raise Forbidden(
            f"you annotated this sentence; {others} other "
            f"{'person' if others == 1 else 'people'} can adjudicate, so one of "
            "them settles it (an admin can change this in the corpus settings)",
            kind="own_annotation",
        )
    return True


def settle(
    db: Session,
    sentence_id: int,
    adjudicator: User,
    *,
    tree_text: str,
    source_annotation_id: int | None = None,
    source_gold_id: int | None = None,
    note: str | None = None,
    confirm_labels: bool = False,
) -> Gold:
    """Settle a sentence in review: ``tree_text`` becomes its gold. Commits.

    ``source_annotation_id`` / ``source_gold_id`` say which submitted tree or earlier gold the
    adjudicator started from (at most one; each must belong to this sentence). Raises BadInput
    for a tree that does not fit the sentence (see validation.validate_tree_text), Conflict
    when the sentence is not in review (any more).
    """
    sentence = db.get(Sentence, sentence_id)
    if sentence is None:
        raise NotFound(f"no sentence with id {sentence_id}")
    corpus = db.get(Corpus, sentence.corpus_id)
    assert corpus is not None
    note = check_note(note)
    ensure_not_blind(db, sentence.id, adjudicator)
    if sentence.state != SENT_IN_REVIEW:
        raise Conflict(
            f"sentence {sentence_id} is {sentence.state}, not in review; reopen it first",
            state=sentence.state,
        )
    own = check_own_settle(db, corpus, sentence.id, adjudicator)
    if source_annotation_id is not None and source_gold_id is not None:
        raise BadInput(
            "give the annotation or the earlier gold the tree started from, not both", kind="source"
        )
    source_text: str | None = None
    if source_annotation_id is not None:
        ann = db.get(Annotation, source_annotation_id)
        if ann is None or ann.sentence_id != sentence.id or ann.state != ANN_SUBMITTED:
            raise BadInput(
                f"annotation {source_annotation_id} is not a submitted annotation "
                f"of sentence {sentence_id}",
                kind="source",
            )
        rev = current_revision(db, ann)
        source_text = rev.tree if rev else None
    if source_gold_id is not None:
        old = db.get(Gold, source_gold_id)
        if old is None or old.sentence_id != sentence.id:
            raise BadInput(
                f"gold {source_gold_id} is not a gold tree of sentence {sentence_id}", kind="source"
            )
        source_text = old.tree
    tree = validate_tree_text(sentence, tree_text, corpus, confirm_labels=confirm_labels)
    text = write_tree(tree)
    # compare-and-set: only one settle of this review wins
    moved = db.execute(
        update(Sentence)
        .where(Sentence.id == sentence.id, Sentence.state == SENT_IN_REVIEW)
        .values(state=SENT_GOLD)
        .execution_options(synchronize_session=False)
    )
    if cast(CursorResult[Any], moved).rowcount != 1:
        db.rollback()
        raise Conflict(f"sentence {sentence_id} was settled or changed meanwhile; reload it")
    db.refresh(sentence)
    gold = make_gold(
        db,
        sentence,
        text,
        provenance="adjudication",
        adjudicator_id=adjudicator.id,
        source_annotation_id=source_annotation_id,
        note=note,
        own_annotation=own,
    )
    edited = None if source_text is None else write_tree(read_tree(source_text)) != text
    db.add(
        Event(
            user_id=adjudicator.id,
            kind="gold.settled",
            corpus_id=corpus.id,
            sentence_id=sentence.id,
            detail={
                "gold_id": gold.id,
                "from_annotation": source_annotation_id,
                "from_gold": source_gold_id,
                "edited": edited,
                "own_annotation": own,
            },
        )
    )
    gold_added(db, corpus)
    db.commit()
    return gold


def corpus_choices(db: Session) -> list[tuple[int, str, int]]:
    """(id, name, sentences in review) of every corpus, by name."""
    waiting = dict(
        db.execute(
            select(Sentence.corpus_id, func.count(Sentence.id))
            .where(Sentence.state == SENT_IN_REVIEW)
            .group_by(Sentence.corpus_id)
        ).all()
    )
    return [
        (c.id, c.name, waiting.get(c.id, 0))
        for c in db.scalars(select(Corpus).order_by(Corpus.name))
    ]


def check_tree(
    db: Session, sentence_id: int, tree_text: str, *, confirm_labels: bool = False
) -> Tree:
    """The adjudicator's tree read and validated for the sentence, storing nothing."""
    sentence = db.get(Sentence, sentence_id)
    if sentence is None:
        raise NotFound(f"no sentence with id {sentence_id}")
    corpus = db.get(Corpus, sentence.corpus_id)
    assert corpus is not None  # a foreign key guarantees it
    return validate_tree_text(sentence, tree_text, corpus, confirm_labels=confirm_labels)
