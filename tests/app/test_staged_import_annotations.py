"""Trees imported as one annotator's annotations are staged like text and gold: checked,
written in short transactions nobody sees, published at once; the second annotator's file
attaches to the first's sentences and completes them; an annotator's own work started
meanwhile is never overwritten (the import fails whole)."""

from __future__ import annotations

import io
from datetime import timedelta

import pytest
from sqlalchemy import func, select

from app.models import (
    ANN_DRAFT,
    ANN_SUBMITTED,
    SENT_GOLD,
    SENT_IN_PROGRESS,
    SENT_IN_REVIEW,
    Annotation,
    Assignment,
    Corpus,
    Revision,
    Sentence,
    reading_rank,
)
from app.services import staged_import
from app.services.imports import ImportFailed
from tests.app.row_counts import count_rows

# Invented sentences; the second annotator's take on the fourth differs (no NP object).
FIRST = [
    "(ROOT (S (NP (DT The) (NN ferry)) (VP (VBD left)) (. .)))",
    "(ROOT (S (NP (NNP Wrennick)) (VP (VBD oiled) (NP (DT the) (NN winch))) (. .)))",
    "(ROOT (S (NP (DT The) (NN tide)) (VP (VBD turned)) (. .)))",
    "(ROOT (S (NP (DT The) (NN crane)) (VP (VBD lifted) (NP (DT a) (NN crate))) (. .)))",
]
SECOND = [
    *FIRST[:3],
    "(ROOT (S (NP (DT The) (NN crane)) (VP (VBD lifted) (DT a) (NN crate)) (. .)))",
]


def _file(trees: list[str]) -> io.BytesIO:
    return io.BytesIO("".join(t + "\n" for t in trees).encode())


def _import(db, trees: list[str], annotator: str, **options):  # type: ignore[no-untyped-def]
    return staged_import.import_handle(
        db,
        _file(trees),
        source=f"{annotator}.ptb",
        corpus_name="Pairs",
        document_name="log",
        kind="annotation",
        annotator=annotator,
        **options,
    )


def test_staged_annotations_are_committed_in_chunks_and_invisible_until_published(
    app, db, people, monkeypatch
) -> None:
    monkeypatch.setattr(staged_import, "STAGE_CHUNK", 2)
    factory = app.state.sessionmaker
    seen: list[tuple[int, int, int, int]] = []

    def look(done: int, total: int) -> None:  # runs between staging chunks
        with factory() as other:  # another connection sees only what was committed
            seen.append(
                (
                    done,
                    other.scalar(select(func.count()).select_from(Revision)) or 0,
                    other.scalar(
                        select(func.count())
                        .select_from(Sentence)
                        .join(Corpus)
                        .where(Corpus.name == "Pairs")
                    )
                    or 0,
                    other.scalar(select(func.count()).select_from(Assignment)) or 0,
                )
            )

    result = _import(db, FIRST, "ann1", progress=look)
    assert result.imported == 4 and result.attached == 0
    # staged in two committed chunks of two trees ...
    assert [(done, revisions) for done, revisions, _, _ in seen[:2]] == [(2, 2), (4, 4)]
    # ... while the corpus had no sentence and nobody was assigned anything
    assert all(in_corpus == 0 and assigned == 0 for _, _, in_corpus, assigned in seen[:2])
    anns = db.scalars(select(Annotation).order_by(Annotation.id)).all()
    assert [(a.user_id, a.state, a.head) for a in anns] == [(people.ann1.id, ANN_SUBMITTED, 1)] * 4
    sentences = db.scalars(select(Sentence).order_by(Sentence.position)).all()
    assert [s.position for s in sentences] == [0, 1, 2, 3]
    assert {s.state for s in sentences} == {SENT_IN_PROGRESS}  # waiting for a second annotator
    ranks = {sid: rank for sid, rank in db.execute(select(Assignment.sentence_id, Assignment.rank))}
    assert ranks == {s.id: reading_rank(s.document_id, s.position) for s in sentences}
    assert db.query(Corpus).count() == 1  # the staging corpus is gone


def test_staged_second_annotator_attaches_and_completes(db, people, monkeypatch) -> None:
    monkeypatch.setattr(staged_import, "STAGE_CHUNK", 3)
    _import(db, FIRST, "ann1")
    result = _import(db, SECOND, "ann2")
    assert (result.attached, result.imported) == (4, 0)
    assert db.query(Sentence).count() == 4
    states = db.scalars(select(Sentence.state).order_by(Sentence.position)).all()
    # identical trees become gold (corpus default), the differing one goes to review
    assert states == [SENT_GOLD, SENT_GOLD, SENT_GOLD, SENT_IN_REVIEW]
    per_sentence = db.execute(
        select(Annotation.sentence_id, func.count()).group_by(Annotation.sentence_id)
    ).all()
    assert sorted(n for _, n in per_sentence) == [2, 2, 2, 2]
    assert db.query(Assignment).filter(Assignment.user_id == people.ann2.id).count() == 4
    assert db.query(Corpus).count() == 1


def test_staged_annotations_never_overwrite_work_started_meanwhile(
    app, db, people, monkeypatch
) -> None:
    monkeypatch.setattr(staged_import, "STAGE_CHUNK", 2)
    _import(db, FIRST, "ann1")
    target = db.scalar(select(Sentence).where(Sentence.position == 3))
    assert target is not None
    factory = app.state.sessionmaker
    before = count_rows(db)
    started: list[int] = []

    def start_draft(done: int, total: int) -> None:  # ann2 opens sentence 4 on the Bench
        if started:
            return
        with factory() as other:
            other.add(Annotation(sentence_id=target.id, user_id=people.ann2.id, state=ANN_DRAFT))
            other.commit()
        started.append(done)

    with pytest.raises(ImportFailed, match="ann2 started 1 of the sentences"):
        _import(db, SECOND, "ann2", progress=start_draft)
    assert started  # the draft was made while the file was staged
    # nothing of the file; the draft is still there
    assert count_rows(db) == {**before, "annotations": before["annotations"] + 1}
    draft = db.scalar(select(Annotation).where(Annotation.user_id == people.ann2.id))
    assert draft is not None and draft.state == ANN_DRAFT and draft.sentence_id == target.id


def test_staged_annotations_failure_at_publish_leaves_nothing(db, people, monkeypatch) -> None:
    monkeypatch.setattr(staged_import, "STAGE_CHUNK", 2)
    _import(db, FIRST, "ann1")
    before = count_rows(db)

    def broken(*args, **kwargs):  # type: ignore[no-untyped-def]
        raise RuntimeError("the disk filled up")

    monkeypatch.setattr(staged_import, "absorb_tree_inventory", broken)  # inside the publish
    with pytest.raises(RuntimeError):
        _import(db, SECOND, "ann2")
    assert count_rows(db) == before


def test_staged_annotations_routed_in_chunks_and_after_a_crash_at_the_next_start(
    db, people, monkeypatch
) -> None:
    """The sentences a file completes go to the agreement service after publishing, a few
    per transaction; killed in between, the next start routes the rest."""
    monkeypatch.setattr(staged_import, "ROUTE_CHUNK", 1)
    _import(db, FIRST, "ann1")
    real = staged_import.agreement.on_submitted
    calls: list[int] = []

    def dies_on_the_third(db_, sentence):  # type: ignore[no-untyped-def]
        calls.append(sentence.id)
        if len(calls) == 3:
            raise KeyboardInterrupt  # the process stops here
        real(db_, sentence)

    monkeypatch.setattr(staged_import.agreement, "on_submitted", dies_on_the_third)
    with pytest.raises(KeyboardInterrupt):
        _import(db, SECOND, "ann2")
    db.rollback()
    in_pairs = select(Sentence.state).join(Corpus).where(Corpus.name == "Pairs")
    states = db.scalars(in_pairs.order_by(Sentence.position)).all()
    # the import is in (every tree of ann2 submitted); two sentences were routed before it stopped
    assert states == [SENT_GOLD, SENT_GOLD, SENT_IN_PROGRESS, SENT_IN_PROGRESS]
    assert db.query(Annotation).filter(Annotation.user_id == people.ann2.id).count() == 4
    monkeypatch.setattr(staged_import.agreement, "on_submitted", real)
    assert staged_import.drop_abandoned_staging(db, older_than=timedelta(0)) == 1
    states = db.scalars(select(Sentence.state).order_by(Sentence.position)).all()
    assert states == [SENT_GOLD, SENT_GOLD, SENT_GOLD, SENT_IN_REVIEW]
    assert db.query(Corpus).count() == 1


def test_staged_annotations_bad_tree_writes_nothing(db, people) -> None:
    before = count_rows(db)
    with pytest.raises(ImportFailed) as caught:
        _import(db, [FIRST[0], "(ROOT (S (NP (DT The) (NN ferry)) (VP (VBD left))"], "ann1")
    assert caught.value.line == 2
    assert count_rows(db) == before
