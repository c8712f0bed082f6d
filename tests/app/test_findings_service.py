"""The finder in the service: a run on request and after a retraining, what it stores, the
verdicts "fine as is" and "reopen", and the option to read submitted annotations."""

from __future__ import annotations

import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.models import (
    RUN_DONE,
    RUN_QUEUED,
    SENT_GOLD,
    SENT_IN_REVIEW,
    Annotation,
    FindingRun,
    Gold,
    Revision,
    Sentence,
)
from app.services import finding_actions as actions
from app.services import findings as svc
from app.services.errors import Conflict
from app.services.imports import import_bytes
from app.services.training import run_training
from tests.app.quality_helpers import OLD_PUMP, import_gold


def _run(app, db: Session, corpus_id: int, **kw) -> FindingRun:  # type: ignore[no-untyped-def]
    run = svc.queue_run(db, corpus_id, reason="test", **kw)
    db.commit()
    assert svc.drain_runs(app.state.sessionmaker) == 1
    db.refresh(run)
    return run


def _pump(db: Session, corpus_id: int, state: str = "open") -> list[svc.FindingEntry]:
    page = svc.finding_page(db, corpus_id, state=state, kind="bracket", per_page=200)
    return [e for e in page.entries if e.row.detail["words"] == OLD_PUMP]


def test_findings_run_stores_ranked_findings_with_who_settled(app, db, people) -> None:
    corpus, sentences = import_gold(db)
    run = _run(app, db, corpus.id)
    assert run.status == RUN_DONE and run.trees == 7
    [entry] = _pump(db, corpus.id)
    occ = entry.row.occurrences
    assert [o["analysis"] for o in occ] == ["ADJP", "NP", "NP"]
    assert occ[0]["sentence"] == sentences[2].id and (occ[0]["start"], occ[0]["end"]) == (0, 3)
    assert {o["by"] for o in occ} == {"import"} and {o["source"] for o in occ} == {"gold"}
    page = svc.finding_page(db, corpus.id, per_page=200)
    assert [e.row.rank for e in page.entries] == sorted(e.row.rank for e in page.entries)
    assert {e.row.kind for e in page.entries} >= {"bracket", "tag"}


def test_findings_fine_as_is_hides_it_now_and_after_the_next_run(app, db, people) -> None:
    corpus, _ = import_gold(db)
    _run(app, db, corpus.id)
    [entry] = _pump(db, corpus.id)
    actions.mark_fine(db, corpus.id, entry.row.id, people.adjudicator, note="both fine")
    assert _pump(db, corpus.id) == []
    [kept] = _pump(db, corpus.id, "fine_as_is")
    assert kept.verdict is not None and kept.verdict.note == "both fine"
    assert kept.verdict_by == "adj"
    _run(app, db, corpus.id)  # a new run finds the same key again
    assert _pump(db, corpus.id) == []
    assert len(_pump(db, corpus.id, "fine_as_is")) == 1


def test_findings_reopen_sends_gold_sentences_back_to_review(app, db, people) -> None:
    corpus, sentences = import_gold(db)
    _run(app, db, corpus.id)
    [entry] = _pump(db, corpus.id)
    done = actions.reopen_finding(db, corpus.id, entry.row.id, people.adjudicator)
    assert done.sentence_ids == [s.id for s in sentences[:3]]
    for s in sentences[:3]:
        db.refresh(s)
        assert s.state == SENT_IN_REVIEW
        gold = db.scalars(select(Gold).where(Gold.sentence_id == s.id)).all()
        assert len(gold) == 1 and gold[0].retired_at is not None  # kept, retired
    db.refresh(sentences[3])
    assert sentences[3].state == SENT_GOLD
    assert [e.state for e in _pump(db, corpus.id, "reopened")] == ["reopened"]
    # reopening again finds nothing gold left to reopen, and says so
    again = actions.reopen_finding(db, corpus.id, entry.row.id, people.adjudicator)
    assert again.sentence_ids == [] and again.skipped == [s.id for s in sentences[:3]]


def test_findings_reopen_is_all_or_nothing(app, db, people, monkeypatch) -> None:
    corpus, sentences = import_gold(db)
    _run(app, db, corpus.id)
    [entry] = _pump(db, corpus.id)
    real = actions.reopen_step
    calls = []

    def second_fails(*args, **kw):  # type: ignore[no-untyped-def]
        calls.append(args[1])
        if len(calls) == 2:
            raise Conflict("changed meanwhile")
        return real(*args, **kw)

    monkeypatch.setattr(actions, "reopen_step", second_fails)
    with pytest.raises(Conflict):
        actions.reopen_finding(db, corpus.id, entry.row.id, people.adjudicator)
    assert len(calls) == 2
    db.expire_all()
    assert [db.get(Sentence, s.id).state for s in sentences[:3]] == [SENT_GOLD] * 3  # type: ignore[union-attr]
    assert db.scalars(select(Gold).where(Gold.retired_at.is_not(None))).all() == []
    assert _pump(db, corpus.id, "reopened") == []


def test_findings_run_reads_submitted_annotations_when_asked(app, db, people) -> None:
    corpus, _ = import_gold(db)
    import_bytes(
        db,
        b"(ROOT (S (ADJP (DT the) (JJ old) (NN pump)) (VP (VBD sank)) (. .)))\n",
        source="ann.ptb",
        corpus_name=corpus.name,
        kind="annotation",
        annotator="ann1",
    )
    ann = db.scalar(select(Annotation).where(Annotation.user_id == people.ann1.id))
    assert (
        ann is not None
        and db.scalar(select(Revision).where(Revision.annotation_id == ann.id)) is not None
    )
    _run(app, db, corpus.id)
    [plain] = _pump(db, corpus.id)
    assert {o["source"] for o in plain.row.occurrences} == {"gold"}
    _run(app, db, corpus.id, with_annotations=True)
    [both] = _pump(db, corpus.id)
    mine = [o for o in both.row.occurrences if o["source"] == "annotation"]
    assert [(o["by"], o["analysis"]) for o in mine] == [("ann1", "ADJP")]


def test_findings_run_is_queued_after_a_retraining(app, db, people) -> None:
    corpus, _ = import_gold(db)
    assert db.scalar(select(FindingRun).where(FindingRun.corpus_id == corpus.id)) is None
    version = run_training(app.state.sessionmaker, corpus.id, reason="test")
    runs = db.scalars(select(FindingRun).where(FindingRun.corpus_id == corpus.id)).all()
    assert [(r.status, r.reason) for r in runs] == [
        (RUN_QUEUED, f"after grammar version {version.number}")
    ]
    assert svc.drain_runs(app.state.sessionmaker) == 1
    assert len(_pump(db, corpus.id)) == 1


def test_findings_request_run_drains_in_the_background(app, db, people) -> None:
    from app.services.training import get_runner

    corpus, _ = import_gold(db)
    run = actions.request_run(app.state, corpus.id, user=people.adjudicator)
    assert run.status == RUN_QUEUED
    get_runner(app.state).wait_idle(60)
    db.expire_all()
    assert db.get(FindingRun, run.id).status == RUN_DONE  # type: ignore[union-attr]
    assert len(_pump(db, corpus.id)) == 1


def test_findings_api_lists_and_takes_verdicts(app, db, people, login) -> None:
    corpus, sentences = import_gold(db)
    adj = login("adj")
    empty = adj.client.get(f"/api/corpora/{corpus.id}/findings")
    assert empty.status_code == 200 and empty.json()["run"] is None
    queued = adj.client.post(
        f"/api/corpora/{corpus.id}/findings/runs", json={}, headers=adj.headers()
    )
    assert queued.status_code == 202 and queued.json()["status"] in ("queued", "done")
    from app.services.training import get_runner

    get_runner(app.state).wait_idle(60)
    listing = adj.client.get(f"/api/corpora/{corpus.id}/findings", params={"kind": "bracket"})
    body = listing.json()
    assert body["run"]["status"] == "done" and body["counts"]["open"] == body["total"] >= 1
    pump = next(f for f in body["findings"] if f["detail"]["words"] == OLD_PUMP)
    assert pump["occurrences"][0] == {
        "sentence": sentences[2].id,
        "start": 0,
        "end": 3,
        "analysis": "ADJP",
        "source": "gold",
        "by": "import",
    }
    back = adj.client.post(
        f"/api/corpora/{corpus.id}/findings/{pump['id']}/reopen",
        json={"note": "look again"},
        headers=adj.headers(),
    )
    assert back.status_code == 200
    assert back.json()["reopened"] == [s.id for s in sentences[:3]]
    bad = adj.client.get(f"/api/corpora/{corpus.id}/findings", params={"state": "closed"})
    assert bad.status_code == 422 and "open" in bad.json()["detail"]
    ann = login("ann1")
    assert ann.client.get(f"/api/corpora/{corpus.id}/findings").status_code == 403
