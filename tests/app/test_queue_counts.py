"""The queue counts kept by triggers (app.counts) stay equal to a recount of assignments,
annotations and sentences whatever writes them: assignments added and removed, annotations
submitted, reopened, moved and deleted, sentences dropped, brought back and deleted, an
annotation import, a corpus removed. The Queue and the Bench read their totals from them."""

from __future__ import annotations

import io
import random

from sqlalchemy import delete, func, select, update

from app.models import (
    ANN_DRAFT,
    ANN_SUBMITTED,
    QUEUE_BLOCK_BITS,
    SENT_DROPPED,
    SENT_QUEUED,
    Annotation,
    Assignment,
    Corpus,
    QueueBlock,
    QueueCount,
    Sentence,
    User,
)
from app.services import annotation as queue
from app.services import staged_import
from tests.app.bench_helpers import make_corpus


def _recount(db) -> dict[tuple[int, int], tuple[int, int, int]]:  # type: ignore[no-untyped-def]
    out: dict[tuple[int, int], list[int]] = {}
    for a in db.scalars(select(Assignment)):
        row = out.setdefault((a.user_id, a.corpus_id), [0, 0, 0])
        row[0] += 1
        state = db.scalar(
            select(Annotation.state).where(
                Annotation.sentence_id == a.sentence_id, Annotation.user_id == a.user_id
            )
        )
        row[1] += state == ANN_SUBMITTED
        row[2] += db.get(Sentence, a.sentence_id).state == SENT_DROPPED
    return {k: (v[0], v[1], v[2]) for k, v in out.items()}


def _kept(db) -> dict[tuple[int, int], tuple[int, int, int]]:  # type: ignore[no-untyped-def]
    return {
        (r.user_id, r.corpus_id): (r.assigned, r.submitted, r.dropped)
        for r in db.scalars(select(QueueCount))
        if (r.assigned, r.submitted, r.dropped) != (0, 0, 0)
    }


def _blocks(db) -> tuple[dict, dict]:  # type: ignore[no-untyped-def]
    """(kept, recounted) assignments per (user, corpus, rank block), zero counts left out."""
    kept = {(b.user_id, b.corpus_id, b.block): b.n for b in db.scalars(select(QueueBlock)) if b.n}
    recounted: dict[tuple[int, int, int], int] = {}
    for a in db.scalars(select(Assignment)):
        block = (a.user_id, a.corpus_id, a.rank >> QUEUE_BLOCK_BITS)
        recounted[block] = recounted.get(block, 0) + 1
    return kept, recounted


def _check(db) -> None:  # type: ignore[no-untyped-def]
    db.expire_all()
    assert _kept(db) == _recount(db)
    kept, recounted = _blocks(db)
    assert kept == recounted


def test_queue_counts_equal_a_recount_through_random_writes(db, people) -> None:
    rng = random.Random(5)  # common practice, no source: a seeded random walk of writes
    users = [people.ann1, people.ann2, people.adjudicator]
    corpora = []
    for name in ("North", "South"):
        corpus, sentences = make_corpus(db, [f"rope {i} ." for i in range(12)], name=name)
        corpora.append((corpus, sentences))
    for _step in range(150):
        corpus, sentences = rng.choice(corpora)
        sentence = rng.choice(sentences)
        user = rng.choice(users)
        if db.get(Sentence, sentence.id) is None:
            continue
        action = rng.randrange(8)
        assigned = db.scalar(
            select(Assignment).where(
                Assignment.sentence_id == sentence.id, Assignment.user_id == user.id
            )
        )
        ann = db.scalar(
            select(Annotation).where(
                Annotation.sentence_id == sentence.id, Annotation.user_id == user.id
            )
        )
        if action == 0 and assigned is None:
            db.add(Assignment(sentence_id=sentence.id, user_id=user.id))
        elif action == 1 and assigned is not None:
            db.delete(assigned)
        elif action == 2 and ann is None:
            db.add(
                Annotation(
                    sentence_id=sentence.id,
                    user_id=user.id,
                    state=rng.choice([ANN_DRAFT, ANN_SUBMITTED]),
                )
            )
        elif action == 3 and ann is not None:
            ann.state = ANN_DRAFT if ann.state == ANN_SUBMITTED else ANN_SUBMITTED
        elif action == 4 and ann is not None:
            db.delete(ann)
        elif action == 5:
            now = db.get(Sentence, sentence.id)
            now.state = SENT_QUEUED if now.state == SENT_DROPPED else SENT_DROPPED
        elif action == 7 and assigned is not None:  # another queue order: a new rank
            assigned.rank = rng.randrange(0, 8 << QUEUE_BLOCK_BITS)
        elif action == 6 and rng.random() < 0.15:
            db.execute(delete(Sentence).where(Sentence.id == sentence.id))
        db.commit()
        _check(db)
    # an annotation moved to another sentence (as a staged import publishes)
    moved = db.scalar(select(Annotation).where(Annotation.state == ANN_SUBMITTED))
    if moved is not None:
        target = db.scalar(
            select(Sentence.id)
            .where(Sentence.id.not_in(select(Annotation.sentence_id)))
            .order_by(Sentence.id)
        )
        db.execute(update(Annotation).where(Annotation.id == moved.id).values(sentence_id=target))
        db.commit()
        _check(db)
    db.execute(delete(Corpus).where(Corpus.id == corpora[0][0].id))
    db.commit()
    _check(db)
    db.execute(delete(User).where(User.id == people.adjudicator.id))  # an account removed
    db.commit()
    _check(db)
    assert db.scalar(select(func.count()).select_from(QueueCount)) >= 1


def test_queue_counts_follow_an_annotation_import_and_feed_the_queue(db, people) -> None:
    trees = "".join(
        f"(ROOT (S (NP (NN crate) (CD {i})) (VP (VBZ waits)) (. .)))\n" for i in range(7)
    )
    for who in ("ann1", "ann2"):
        staged_import.import_handle(
            db,
            io.BytesIO(trees.encode()),
            source=f"{who}.ptb",
            corpus_name="Crates",
            document_name="crates",  # the second file attaches to the first's sentences
            kind="annotation",
            annotator=who,
        )
        _check(db)
    assert db.scalar(select(func.count()).select_from(Sentence)) == 7
    assert queue.queue_counts(db, people.ann2) == (7, 7)
    first = db.scalar(select(Sentence).order_by(Sentence.id))
    first.state = SENT_DROPPED
    db.commit()
    _check(db)
    assert queue.queue_counts(db, people.ann2) == (6, 7)  # a dropped one is out of the queue
    last = db.scalar(select(Sentence.id).order_by(Sentence.id.desc()))
    place = queue.queue_place(db, people.ann2, last)
    assert (place.index, place.total) == (6, 6)


def test_queue_place_from_rank_blocks_equals_a_count_of_the_queue(db, people) -> None:
    """The Bench's place in the queue (blocks before it plus a count inside its block)
    equals the place counted over the whole queue, with ranks spread over many blocks,
    several in one block, dropped sentences, new ranks and removed assignments."""
    rng = random.Random(11)  # common practice, no source: a seeded random layout
    sentences = []
    for name in ("East", "West"):
        _, made = make_corpus(db, [f"cleat {i} ." for i in range(30)], name=name)
        sentences += made
    for s in sentences:
        db.add(Assignment(sentence_id=s.id, user_id=people.ann1.id))
    db.commit()

    def shuffle_ranks(share: float) -> None:
        for a in db.scalars(select(Assignment)):
            if rng.random() < share:
                a.rank = rng.randrange(0, 12 << QUEUE_BLOCK_BITS)
        db.commit()

    def check() -> None:
        db.expire_all()
        rows = db.execute(
            select(Assignment.corpus_id, Assignment.rank, Assignment.sentence_id, Sentence.state)
            .join(Sentence, Sentence.id == Assignment.sentence_id)
            .where(Assignment.user_id == people.ann1.id)
        ).all()
        queue = sorted((c, r, sid) for c, r, sid, state in rows if state != SENT_DROPPED)
        for place, (_, _, sid) in enumerate(queue, start=1):
            assert queue_place(sid) == place, sid
        kept, recounted = _blocks(db)
        assert kept == recounted and len(kept) > 10  # ranks spread over many blocks

    def queue_place(sid: int) -> int:
        return queue.queue_place(db, people.ann1, sid).index

    shuffle_ranks(1.0)
    check()
    for s in rng.sample(sentences, 8):
        db.get(Sentence, s.id).state = SENT_DROPPED
    db.commit()
    check()
    shuffle_ranks(0.3)
    for a in rng.sample(list(db.scalars(select(Assignment))), 6):
        db.delete(a)
    db.commit()
    check()
