"""Pages that cost one page: cursor pages see every row once, counts equal a recount, the
queue's neighbours equal a brute-force walk, the Agreement sums equal a fresh sum."""

from __future__ import annotations

import random
from typing import Any

import pytest
from sqlalchemy import create_engine, delete, func, insert, select, text, update
from sqlalchemy.orm import Session

from app.counts import ensure_triggers, installed
from app.models import (
    ANN_FLAGGED,
    ANN_SUBMITTED,
    SENTENCE_STATES,
    AgreementRecord,
    Annotation,
    Assignment,
    Corpus,
    Document,
    Sentence,
    SentenceCount,
    User,
)
from app.services import agreement
from app.services import annotation as svc
from app.services.corpora import delete_corpus, sentence_page
from app.services.imports import import_bytes
from tests.app.bench_helpers import assign, make_corpus
from tests.app.conftest import on_postgres

TREE = "(ROOT (S (NP (NNS Gulls)) (VP (VBD circled)) (. .)))"


def _recount(db: Session) -> dict[tuple[int, str], int]:
    return {
        (d, s): n
        for d, s, n in db.execute(
            select(Sentence.document_id, Sentence.state, func.count()).group_by(
                Sentence.document_id, Sentence.state
            )
        )
    }


def _counts(db: Session) -> dict[tuple[int, str], int]:
    return {
        (d, s): n
        for d, s, n in db.execute(
            select(SentenceCount.document_id, SentenceCount.state, SentenceCount.n)
        )
        if n
    }


def test_counts_stay_equal_to_a_recount(db, people, rng: random.Random) -> None:
    import_bytes(db, ((TREE + "\n") * 3).encode(), source="g.ptb", corpus_name="Quay", kind="gold")
    import_bytes(
        db,
        "".join(f"Crate {i} waits .\n" for i in range(40)).encode(),
        source="a.txt",
        corpus_name="Quay",
    )
    import_bytes(
        db,
        "".join(f"Rope {i} frays .\n" for i in range(25)).encode(),
        source="b.txt",
        corpus_name="Other",
    )
    assert _counts(db) == _recount(db) and sum(_counts(db).values()) == 68
    ids = list(db.scalars(select(Sentence.id)))
    for _ in range(60):  # state changes one by one, in bulk, and moves between documents
        chosen = rng.sample(ids, rng.randint(1, 6))
        db.execute(
            update(Sentence)
            .where(Sentence.id.in_(chosen))
            .values(state=rng.choice(SENTENCE_STATES))
        )
        db.commit()
    docs = list(db.scalars(select(Document).order_by(Document.id)))
    moved = db.scalar(select(Sentence).where(Sentence.document_id == docs[1].id))
    moved.document_id, moved.position = docs[0].id, 999
    db.commit()
    db.execute(delete(Sentence).where(Sentence.id.in_(rng.sample(ids, 5))))
    db.commit()
    assert _counts(db) == _recount(db)
    other = db.scalar(select(Corpus).where(Corpus.name == "Other"))
    delete_corpus(db, other.id, "Other", user=people.admin)
    db.commit()
    assert _counts(db) == _recount(db)
    assert not db.scalar(
        select(func.count()).select_from(SentenceCount).where(SentenceCount.corpus_id == other.id)
    )


def test_counts_triggers_come_back_with_a_recount_when_missing(app, db) -> None:
    import_bytes(db, b"One .\nTwo .\n", source="t.txt", corpus_name="C")
    engine = app.state.engine
    with engine.begin() as conn:
        from app.counts import drop_triggers

        drop_triggers(conn)
        assert not installed(conn)
    db.execute(update(Sentence).values(state="gold"))  # unseen by any trigger
    db.commit()
    assert _counts(db) != _recount(db)
    # End this session's read transaction: on PostgreSQL, DROP TRIGGER (part of reinstalling)
    # waits for every open transaction that has read the table, this one included.
    db.rollback()
    assert ensure_triggers(engine) is True and ensure_triggers(engine) is False
    db.expire_all()
    assert _counts(db) == _recount(db)


def _walk_corpus(
    db: Session, corpus: Corpus, per_page: int, *, state: str | None = None, between: object = None
) -> list[int]:
    seen: list[int] = []
    after = None
    while True:
        page = sentence_page(db, corpus, per_page=per_page, state=state, after=after)
        seen += [row.sentence.id for row in page.rows]
        if callable(between):
            between()
        if page.next_cursor is None:
            return seen
        after = page.next_cursor


def test_corpus_pages_return_every_row_once_under_concurrent_inserts(db, rng) -> None:
    corpus, sentences = make_corpus(db, [f"Buoy {i} drifts ." for i in range(57)])
    doc = db.scalar(select(Document))
    original = [s.id for s in sentences]
    added: list[int] = []
    counter = iter(range(100, 10_000))

    def insert_some() -> None:  # another request adds sentences while the walk goes on
        for _ in range(rng.randint(0, 3)):
            s = Sentence(
                corpus_id=corpus.id,
                document_id=doc.id,
                position=next(counter),
                tokens=["new"],
                text="new",
            )
            db.add(s)
            db.flush()
            added.append(s.id)
        db.commit()

    seen = _walk_corpus(db, corpus, 10, between=insert_some)
    assert len(seen) == len(set(seen))
    assert set(original) <= set(seen) and set(seen) <= set(original) | set(added)
    assert seen[:57] == original  # reading order
    backwards: list[int] = []
    page = sentence_page(db, corpus, per_page=8, last=True)
    while True:
        backwards = [row.sentence.id for row in page.rows] + backwards
        if page.prev_cursor is None:
            break
        page = sentence_page(db, corpus, per_page=8, before=page.prev_cursor)
    assert backwards == sorted(backwards, key=seen.index) and set(backwards) == set(original) | set(
        added
    )


def _queue_ids(
    db: Session, user: User, limit: int, between: object = None, corpus_id: int | None = None
) -> list[int]:
    seen: list[int] = []
    after = None
    while True:
        page = svc.queue_page(db, user, corpus_id, after=after, limit=limit)
        assert page.first_index == len(seen) + 1 or between is not None
        seen += [it.sentence_id for it in page.items]
        if callable(between):
            between()
        if page.next_cursor is None:
            return seen
        after = page.next_cursor


def test_queue_pages_return_every_row_once_under_concurrent_inserts(db, people, rng) -> None:
    _, first = make_corpus(db, [f"Net {i} dries ." for i in range(30)], name="Nets")
    _, second = make_corpus(db, [f"Oar {i} rests ." for i in range(23)], name="Oars")
    assign(db, first + second, people.ann1)
    extra = make_corpus(db, [f"Late {i} ." for i in range(40)], name="Late")[1]
    original = [s.id for s in first + second]
    added: list[int] = []

    def assign_some() -> None:
        for _ in range(rng.randint(0, 3)):
            if extra:
                s = extra.pop(rng.randrange(len(extra)))
                db.add(Assignment(sentence_id=s.id, user_id=people.ann1.id))
                added.append(s.id)
        db.commit()

    seen = _queue_ids(db, people.ann1, 7, between=assign_some)
    assert len(seen) == len(set(seen)) and set(original) <= set(seen)
    assert set(seen) <= set(original) | set(added)
    assert seen[:53] == original  # corpus, then reading order
    only = _queue_ids(db, people.ann1, 5, corpus_id=second[0].corpus_id)
    assert only == [s.id for s in second]


def _brute_place(db: Session, user: User, sentence_id: int) -> tuple:
    """The queue place computed the plain way: every row in order, then a linear scan."""
    rows = db.execute(
        select(Assignment.sentence_id, Annotation.state)
        .join(Sentence, Sentence.id == Assignment.sentence_id)
        .outerjoin(
            Annotation,
            (Annotation.sentence_id == Assignment.sentence_id) & (Annotation.user_id == user.id),
        )
        .where(Assignment.user_id == user.id)
        .order_by(Sentence.corpus_id, Sentence.document_id, Sentence.position)
    ).all()
    ids = [r[0] for r in rows]
    i = ids.index(sentence_id)
    nxt = next(
        (sid for sid, st in [*rows[i + 1 :], *rows[:i]] if st not in (ANN_SUBMITTED, ANN_FLAGGED)),
        None,
    )
    return (
        i + 1,
        len(ids),
        sum(1 for r in rows if r[1] == ANN_SUBMITTED),
        ids[i - 1] if i else None,
        ids[i + 1] if i + 1 < len(ids) else None,
        nxt,
    )


def test_queue_place_equals_a_walk_of_the_whole_queue(db, people, rng) -> None:
    _, first = make_corpus(db, [f"Hull {i} leaks ." for i in range(15)], name="Hulls")
    _, second = make_corpus(db, [f"Sail {i} tears ." for i in range(12)], name="Sails")
    every = first + second
    assign(db, every, people.ann1)
    for s in every:
        state = rng.choice([None, "draft", ANN_SUBMITTED, ANN_SUBMITTED, ANN_FLAGGED])
        if state:
            db.add(Annotation(sentence_id=s.id, user_id=people.ann1.id, state=state, head=1))
    db.commit()
    for s in every:
        place = svc.queue_place(db, people.ann1, s.id)
        assert (
            place.index,
            place.total,
            place.submitted,
            place.prev_id,
            place.next_id,
            place.next_open_id,
        ) == _brute_place(db, people.ann1, s.id)
    opened = svc.next_open(db, people.ann1)
    ordered = [s.id for s in every]
    states = dict(db.execute(select(Annotation.sentence_id, Annotation.state)).all())
    assert opened == next(
        (sid for sid in ordered if states.get(sid) not in (ANN_SUBMITTED, ANN_FLAGGED)), None
    )


def test_queue_api_pages_with_a_cursor(db, people, login) -> None:
    _, sentences = make_corpus(db, [f"Rope {i} coils ." for i in range(9)])
    assign(db, sentences, people.ann1)
    me = login("ann1")
    seen: list[int] = []
    url = "/api/queue?limit=4"
    while url:
        body = me.client.get(url).json()
        assert body["total"] == 9 and body["first_index"] == len(seen) + 1
        seen += [it["sentence_id"] for it in body["items"]]
        url = f"/api/queue?limit=4&after={body['next_cursor']}" if body["next_cursor"] else ""
    assert seen == [s.id for s in sentences]
    bad = me.client.get("/api/queue?after=1-2")
    assert bad.status_code == 422 and "CORPUS-RANK-SENTENCE" in bad.json()["detail"]


def _record(
    db: Session, corpus: Corpus, sentence: Sentence, a: User, b: User, rng: random.Random
) -> None:
    """One agreement record of ``a`` and ``b`` on the sentence (their annotations made if
    they have none: a second record of a pair stands for a hand-in again after a reopen)."""
    anns = []
    for u in (a, b):
        ann = db.scalar(
            select(Annotation).where(
                Annotation.sentence_id == sentence.id, Annotation.user_id == u.id
            )
        )
        if ann is None:
            ann = Annotation(sentence_id=sentence.id, user_id=u.id, state="submitted", head=1)
            db.add(ann)
        anns.append(ann)
    db.flush()
    m, ca, cb = rng.randint(1, 9), rng.randint(9, 12), rng.randint(9, 12)
    db.add(
        AgreementRecord(
            corpus_id=corpus.id,
            sentence_id=sentence.id,
            annotation_a_id=anns[0].id,
            annotation_b_id=anns[1].id,
            user_a_id=a.id,
            user_b_id=b.id,
            matched=m,
            count_a=ca,
            count_b=cb,
            labelled_precision=m / cb,
            labelled_recall=m / ca,
            labelled_f1=2 * m / (ca + cb),
            unlabelled_f1=1.0,
            pos_agreement=1.0,
            identical=rng.random() < 0.2,
            detail={
                "per_label": {rng.choice("ABC"): [1, 2, rng.randint(1, 3)]},
                "unlabelled": [m, ca, cb],
                "pos": [rng.randint(3, 5), 5],
                "confusions": [[rng.choice("AB"), "C", 1]],
            },
        )
    )
    db.commit()


def _fresh(db: Session, corpus_id: int) -> agreement.CorpusAgreement:
    return agreement.figures_afresh(db, corpus_id)


def test_agreement_sums_kept_between_views_equal_a_fresh_sum(db, people, rng) -> None:
    corpus, sentences = make_corpus(db, [f"Tide {i} turns ." for i in range(30)])
    for s in sentences[:10]:
        _record(db, corpus, s, people.ann1, people.ann2, rng)
    first = agreement.corpus_figures(db, corpus.id)
    assert first.records == 10
    for s in sentences[10:25]:
        _record(db, corpus, s, people.ann1 if s.id % 2 else people.ann2, people.adjudicator, rng)
    kept = agreement.corpus_figures(db, corpus.id)
    assert kept == _fresh(db, corpus.id) and kept.records == 25
    db.execute(delete(Sentence).where(Sentence.id == sentences[3].id))  # records go with it
    db.commit()
    _record(db, corpus, sentences[26], people.ann1, people.ann2, rng)
    after_removal = agreement.corpus_figures(db, corpus.id)
    assert after_removal.records == 25 and after_removal == _fresh(db, corpus.id)


def test_stored_agreement_sums_equal_a_recount_through_a_random_walk(db, people, rng) -> None:
    """Records logged, sentences dropped, brought back and removed, in a seeded order, with
    views from two processes (one keeps its sums in memory, the other starts afresh each
    time, from the stored sums): after every view the stored sums are current and equal a
    sum from nothing, and both readers' figures equal it; a process starting afresh adds the
    records after the stored sums instead of summing every record again."""
    corpus, sentences = make_corpus(db, [f"Mast {i} creaks ." for i in range(24)])
    who = [people.ann1, people.ann2, people.adjudicator, people.admin]
    sums_everything = agreement.summed_afresh
    afresh_calls = []

    def counted(db: Session, corpus_id: int) -> object:
        afresh_calls.append(corpus_id)
        return sums_everything(db, corpus_id)

    for step in range(60):
        op = rng.choice(["record"] * 6 + ["drop", "back", "remove"])
        live = [s for s in sentences if db.get(Sentence, s.id) is not None]
        if op == "record" and live:
            a, b = rng.sample(who, 2)
            _record(db, corpus, rng.choice(live), a, b, rng)
        elif op in ("drop", "back") and live:
            state = "dropped" if op == "drop" else "queued"
            db.execute(
                update(Sentence).where(Sentence.id == rng.choice(live).id).values(state=state)
            )
            db.commit()
        elif op == "remove" and len(live) > 12:
            db.execute(delete(Sentence).where(Sentence.id == rng.choice(live).id))
            db.commit()
        if step % 3:
            continue
        db.expire_all()
        expected = agreement.figures_afresh(db, corpus.id)
        assert agreement.corpus_figures(db, corpus.id) == expected, step  # sums in memory
        marks = agreement._marks(db, corpus.id)
        kept = agreement._kept(db, corpus.id, marks[1])
        assert kept is not None and (kept.seen, kept.changes) == marks, step
        assert kept.to_json() == agreement.summed_afresh(db, corpus.id).to_json(), step
        # a new process: nothing in memory, the stored sums and the records after them
        agreement.forget_kept_in_memory()
        logged_since = op == "record"
        if logged_since:
            # a record logged after the stored sums: the new process adds just that one
            _record(db, corpus, rng.choice(live), *rng.sample(who, 2), rng)
            expected = agreement.figures_afresh(db, corpus.id)
        afresh_calls.clear()
        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(agreement, "summed_afresh", counted)
            assert agreement.corpus_figures(db, corpus.id) == expected, step
        assert afresh_calls == [], step  # started from the stored sums
        agreement.forget_kept_in_memory()


def test_stored_sums_are_never_replaced_by_older_ones(db, people, rng) -> None:
    """Two processes storing at once: sums made over fewer records (or at an older change
    mark) never replace newer stored ones, whichever stores last."""
    from app.services import kept_sums

    corpus, sentences = make_corpus(db, [f"Keel {i} dries ." for i in range(3)])
    _record(db, corpus, sentences[0], people.ann1, people.ann2, rng)
    old = agreement.summed_afresh(db, corpus.id)
    _record(db, corpus, sentences[1], people.ann1, people.ann2, rng)
    new = agreement.summed_afresh(db, corpus.id)
    assert (old.seen, new.seen) == (1, 2)
    for tally in (new, old):  # the newer stores first, the older tries after it
        kept_sums.store(
            db, corpus.id, "agreement", tally.changes, tally.seen, tally.last_id, tally.to_json()
        )
    kept = agreement._kept(db, corpus.id, new.changes)
    assert kept is not None and kept.seen == 2 and kept.to_json() == new.to_json()
    # a change: the mark moves on
    db.execute(delete(Sentence).where(Sentence.id == sentences[0].id))
    db.commit()
    after = agreement.summed_afresh(db, corpus.id)
    assert after.changes > new.changes and after.seen == 1
    assert kept_sums.store(
        db, corpus.id, "agreement", after.changes, after.seen, after.last_id, after.to_json()
    )
    assert agreement._kept(db, corpus.id, new.changes) is None  # the older mark is gone


@pytest.mark.skipif(not on_postgres(), reason="two writers at once need PostgreSQL")
def test_hand_ins_of_one_corpus_in_two_connections_do_not_wait_at_one_row(
    settings, db, people
) -> None:
    """Two transactions of one corpus, each handing in annotations and logging a record,
    both open at once: the second's change marks do not wait for the first's commit (each
    server process adds to its own row), and the marks then equal a recount."""
    corpus, sentences = make_corpus(db, ["Buoy one drifts .", "Buoy two drifts ."])
    engine = create_engine(settings.resolved_database_url)
    opened = []
    try:
        # two connections whose server processes write to different rows
        writers: dict[int, Any] = {}
        while len(writers) < 2:
            conn = engine.connect()
            opened.append(conn)
            writers.setdefault(int(conn.scalar(text("SELECT pg_backend_pid() % 64"))), conn)
        for conn, sentence in zip(writers.values(), sentences, strict=True):
            conn.execute(text("SET LOCAL lock_timeout = '2s'"))
            ids = [
                conn.scalar(
                    insert(Annotation)
                    .values(sentence_id=sentence.id, user_id=u.id, state="submitted", head=1)
                    .returning(Annotation.id)
                )
                for u in (people.ann1, people.ann2)
            ]
            conn.execute(
                insert(AgreementRecord).values(
                    corpus_id=corpus.id,
                    sentence_id=sentence.id,
                    annotation_a_id=ids[0],
                    annotation_b_id=ids[1],
                    user_a_id=people.ann1.id,
                    user_b_id=people.ann2.id,
                    matched=3,
                    count_a=4,
                    count_b=4,
                    labelled_precision=0.75,
                    labelled_recall=0.75,
                    labelled_f1=0.75,
                    unlabelled_f1=1.0,
                    pos_agreement=1.0,
                    identical=False,
                    detail={},
                )
            )
        for conn in writers.values():  # both were open at once: neither waited
            conn.commit()
    finally:
        for conn in opened:
            conn.close()
        engine.dispose()
    db.expire_all()
    records, _ = agreement._marks(db, corpus.id)
    assert records == 2 == len(db.scalars(select(AgreementRecord)).all())
    assert agreement.corpus_figures(db, corpus.id) == agreement.figures_afresh(db, corpus.id)
