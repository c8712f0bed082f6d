"""The agreement log: records written when the last assigned annotation is submitted.

Trees are submitted through the Bench's JSON API, so the hook runs exactly as in the service.
The figures are worked out by hand below for the trees A and B of review_helpers (PARSEVAL
conventions of parser.scoring: no ROOT, no preterminals, the final "." removed before spans
are counted): A has S(0,7) NP(0,2) VP(2,7) NP(3,5) PP(5,7) NP(6,7), 6 constituents; B has
S(0,7) NP(0,2) VP(2,7) NP(3,7) NP(3,5) ADVP(5,7) NP(6,7), 7 constituents.
"""

from __future__ import annotations

import pytest
from sqlalchemy import delete, func, select

from app.models import (
    SENT_GOLD,
    SENT_IN_PROGRESS,
    SENT_IN_REVIEW,
    AgreementRecord,
    Annotation,
    Assignment,
    Corpus,
    Event,
    Gold,
    Sentence,
)
from app.services import agreement
from tests.app.bench_helpers import assign, make_corpus
from tests.app.review_helpers import LABELS, SENTENCE, TAGS, TREE_A, TREE_B
from tests.app.review_helpers import submit_tree as _submit


@pytest.fixture
def one_sentence(db, people):  # type: ignore[no-untyped-def]
    corpus, sentences = make_corpus(db, [SENTENCE], labels=LABELS, tags=TAGS)
    assign(db, sentences, people.ann1, people.ann2)
    return corpus, sentences[0]


def test_different_trees_log_hand_worked_figures_and_go_to_review(db, login, one_sentence):
    corpus, sentence = one_sentence
    ann1, ann2 = login("ann1"), login("ann2")
    _submit(ann1, sentence.id, TREE_A)
    db.expire_all()
    assert db.scalars(select(AgreementRecord)).all() == []  # ann2 has not submitted yet
    assert db.get(Sentence, sentence.id).state == SENT_IN_PROGRESS
    _submit(ann2, sentence.id, TREE_B)
    db.expire_all()
    [rec] = db.scalars(select(AgreementRecord)).all()
    assert (rec.user_a_id, rec.user_b_id) == (ann1.user_id, ann2.user_id)
    # shared labelled: S, NP(0,2), VP, NP(3,5), NP(6,7) = 5; PP(5,7) vs ADVP(5,7) differ
    assert (rec.matched, rec.count_a, rec.count_b) == (5, 6, 7)
    assert rec.labelled_precision == pytest.approx(5 / 7)  # B scored against A
    assert rec.labelled_recall == pytest.approx(5 / 6)
    assert rec.labelled_f1 == pytest.approx(10 / 13)  # 2*5 / (6+7)
    # unlabelled: every span of A is in B: 6 matched of 6 and 7 -> 12/13
    assert rec.unlabelled_f1 == pytest.approx(12 / 13)
    assert rec.pos_agreement == 1.0  # the same tags on the 7 counted words
    assert rec.identical is False
    assert rec.detail["confusions"] == [["PP", "ADVP", 1]]
    assert rec.detail["per_label"]["PP"] == [0, 1, 0]
    assert rec.detail["per_label"]["NP"] == [3, 3, 4]
    assert db.get(Sentence, sentence.id).state == SENT_IN_REVIEW
    assert db.scalars(select(Gold)).all() == []


def test_identical_trees_become_gold_by_agreement(db, login, one_sentence):
    corpus, sentence = one_sentence
    _submit(login("ann1"), sentence.id, TREE_A)
    _submit(login("ann2"), sentence.id, TREE_A)
    db.expire_all()
    [rec] = db.scalars(select(AgreementRecord)).all()
    assert rec.identical and rec.labelled_f1 == 1.0 and (rec.count_a, rec.count_b) == (6, 6)
    [gold] = db.scalars(select(Gold)).all()
    assert gold.provenance == "agreement" and gold.tree == TREE_A
    first = db.scalar(select(Annotation).order_by(Annotation.id))
    assert gold.source_annotation_id == first.id
    assert db.get(Sentence, sentence.id).state == SENT_GOLD


def test_identical_trees_go_to_review_when_the_setting_is_off(db, login, one_sentence):
    corpus, sentence = one_sentence
    c = db.get(Corpus, corpus.id)
    c.settings = {**c.settings, "auto_gold_when_identical": False}
    db.commit()
    _submit(login("ann1"), sentence.id, TREE_A)
    _submit(login("ann2"), sentence.id, TREE_A)
    db.expire_all()
    assert db.get(Sentence, sentence.id).state == SENT_IN_REVIEW
    assert db.scalars(select(Gold)).all() == []


def test_same_scores_but_different_brackets_are_not_identical(db, login, one_sentence):
    # Moving the final "." inside the VP changes no counted span (punctuation is removed
    # before counting), so F1 is 1.0, but the trees differ: a human must look.
    corpus, sentence = one_sentence
    moved = (
        "(ROOT (S (NP (DT the) (NN ferry)) (VP (VBD left) (NP (DT the) (NN quay)) "
        "(PP (IN at) (NP (NN dawn))) (. .))))"
    )
    _submit(login("ann1"), sentence.id, TREE_A)
    _submit(login("ann2"), sentence.id, moved)
    db.expire_all()
    [rec] = db.scalars(select(AgreementRecord)).all()
    assert rec.labelled_f1 == 1.0 and rec.identical is False
    assert db.get(Sentence, sentence.id).state == SENT_IN_REVIEW


def test_calling_the_hook_again_logs_nothing_new(db, login, one_sentence):
    corpus, sentence = one_sentence
    _submit(login("ann1"), sentence.id, TREE_A)
    _submit(login("ann2"), sentence.id, TREE_B)
    db.expire_all()
    agreement.on_submitted(db, db.get(Sentence, sentence.id))
    db.commit()
    assert len(db.scalars(select(AgreementRecord)).all()) == 1
    events = db.scalars(select(Event).where(Event.kind == "agreement.logged")).all()
    assert [e.detail["pairs"] for e in events] == [1, 0]


def test_three_annotators_give_three_pairs(db, login, people):
    corpus, [sentence] = make_corpus(db, [SENTENCE], labels=LABELS, tags=TAGS)
    assign(db, [sentence], people.ann1, people.ann2, people.adjudicator)
    _submit(login("ann1"), sentence.id, TREE_A)
    _submit(login("ann2"), sentence.id, TREE_B)
    db.expire_all()
    assert db.scalars(select(AgreementRecord)).all() == []  # adj has not submitted
    _submit(login("adj"), sentence.id, TREE_A)
    db.expire_all()
    recs = db.scalars(select(AgreementRecord).order_by(AgreementRecord.id)).all()
    assert [(r.matched, r.count_a, r.count_b) for r in recs] == [(5, 6, 7), (6, 6, 6), (5, 7, 6)]
    assert db.get(Sentence, sentence.id).state == SENT_IN_REVIEW  # B differs from A and C


def test_without_assignments_the_corpus_setting_decides(db, people):
    from app.models import ANN_SUBMITTED, Revision

    corpus, [sentence] = make_corpus(db, [SENTENCE], labels=LABELS, tags=TAGS)

    def submitted(user_id: int, tree: str) -> None:
        ann = Annotation(sentence_id=sentence.id, user_id=user_id, state=ANN_SUBMITTED, head=1)
        db.add(ann)
        db.flush()
        db.add(Revision(annotation_id=ann.id, number=1, tree=tree, user_id=user_id))
        db.flush()
        agreement.on_submitted(db, sentence)
        db.commit()

    submitted(people.ann1.id, TREE_A)
    assert db.scalars(select(AgreementRecord)).all() == []  # 1 of the default 2
    submitted(people.ann2.id, TREE_A)
    assert len(db.scalars(select(AgreementRecord)).all()) == 1
    assert db.get(Sentence, sentence.id).state == SENT_GOLD


def test_figures_sum_records_of_the_corpus(db, login, people):
    corpus, sentences = make_corpus(
        db, [SENTENCE, SENTENCE.replace("dawn", "noon")], labels=LABELS, tags=TAGS
    )
    assign(db, sentences, people.ann1, people.ann2)
    a1, a2 = login("ann1"), login("ann2")
    _submit(a1, sentences[0].id, TREE_A)
    _submit(a2, sentences[0].id, TREE_B)
    _submit(a1, sentences[1].id, TREE_A.replace("dawn", "noon"))
    _submit(a2, sentences[1].id, TREE_A.replace("dawn", "noon"))
    fig = agreement.corpus_figures(db, corpus.id)
    # micro-average: matched 5 + 6 = 11 over 6+7 and 6+6 constituents -> 22 / 25
    assert fig.records == 2 and fig.identical == 1
    assert fig.counts.f1 == pytest.approx(22 / 25)
    [pair] = fig.pairs
    assert (pair.user_a, pair.user_b, pair.sentences) == ("Ann1", "Ann2", 2)
    worst = fig.labels[0]
    # ADVP: only in B of the first pair -> F1 0. PP: first pair [0 matched, 1 in A, 0 in B],
    # second pair [1, 1, 1] -> matched 1 of 2 and 1: F1 = 2*1 / (2+1) = 2/3
    assert worst.label == "ADVP" and worst.counts.f1 == 0.0
    assert {lf.label: lf.counts.f1 for lf in fig.labels}["PP"] == pytest.approx(2 / 3)
    assert fig.confusions == [("ADVP", "PP", 1)]
    assert fig.period == "day" and len(fig.periods) == 1 and fig.periods[0].records == 2
    csv_text = agreement.agreement_csv(db, corpus.id)
    lines = csv_text.strip().split("\n")
    assert lines[0].split(",") == list(agreement.CSV_COLUMNS)
    assert len(lines) == 3 and ",0.7692," in lines[1]  # 10/13 rounded to 4 places


# --- the blind rule on the log ---------------------------------------------------------------


def _csv_sentences(client, corpus_id: int) -> list[int]:  # type: ignore[no-untyped-def]
    resp = client.get(f"/agreement/log.csv?corpus={corpus_id}")
    assert resp.status_code == 200, resp.text
    lines = resp.text.strip().splitlines()
    assert lines[0].startswith("record_id,")
    return [int(line.split(",")[2]) for line in lines[1:]]


def test_log_hides_a_sentence_from_its_unfinished_annotator(db, login, people) -> None:
    # two sentences compared by ann1 and ann2 (different trees on the first, the same on the
    # second); then the adjudicator is assigned the first as a third annotator
    corpus, (first, second) = make_corpus(db, [SENTENCE, SENTENCE], labels=LABELS, tags=TAGS)
    assign(db, [first, second], people.ann1, people.ann2)
    ann1, ann2 = login("ann1"), login("ann2")
    for sentence, tree in ((first, TREE_B), (second, TREE_A)):
        _submit(ann1, sentence.id, TREE_A)
        _submit(ann2, sentence.id, tree)
    assign(db, [db.get(Sentence, first.id)], people.adjudicator)
    adj = login("adj")
    # the finished annotators and an admin see both rows; the adjudicator only the second
    for who in (ann1, login("admin")):
        assert sorted(_csv_sentences(who.client, corpus.id)) == [first.id, second.id]
    assert _csv_sentences(adj.client, corpus.id) == [second.id]
    # the sums leave the first sentence out for them too: one sentence, F1 1.0 (the
    # identical pair), no PP/ADVP confusion of the first sentence
    mine = agreement.corpus_figures(db, corpus.id, viewer=people.adjudicator)
    assert (mine.records, mine.sentences, mine.identical) == (1, 1, 1)
    assert mine.counts.f1 == 1.0 and mine.confusions == []
    assert [(p.sentences, p.counts.f1) for p in mine.pairs] == [(1, 1.0)]
    everyone = agreement.corpus_figures(db, corpus.id, viewer=people.ann1)
    assert (everyone.records, everyone.sentences) == (2, 2)
    assert everyone.confusions == [("ADVP", "PP", 1)]
    page = adj.client.get(f"/agreement?corpus={corpus.id}").text
    assert "ADVP" not in page  # the confusion of the sentence still being annotated
    assert "ADVP" in ann1.client.get(f"/agreement?corpus={corpus.id}").text
    # once the adjudicator is no annotator of it any more (the assignment taken back: the
    # sentence is in review and takes no further annotation), the row and its sums come back
    db.execute(
        delete(Assignment).where(
            Assignment.sentence_id == first.id, Assignment.user_id == people.adjudicator.id
        )
    )
    db.commit()
    assert sorted(_csv_sentences(adj.client, corpus.id)) == [first.id, second.id]
    after = agreement.corpus_figures(db, corpus.id, viewer=people.adjudicator)
    assert after.sentences == 2 and ("ADVP", "PP", 1) in after.confusions


# --- sums kept between views --------------------------------------------------------------


def _recounted(db, corpus_id: int, hidden: set[int]) -> tuple:  # type: ignore[no-untyped-def]
    """The headline figures summed straight from the records (dropped and hidden sentences
    left out), independently of the kept sums."""
    rows = db.execute(
        select(AgreementRecord)
        .join(Sentence, Sentence.id == AgreementRecord.sentence_id)
        .where(AgreementRecord.corpus_id == corpus_id, Sentence.state != "dropped")
    ).scalars()
    rows = [r for r in rows if r.sentence_id not in hidden]
    pairs: dict[tuple[int, ...], set[int]] = {}
    for r in rows:
        pair = tuple(sorted((r.user_a_id, r.user_b_id)))
        pairs.setdefault(pair, set()).add(r.sentence_id)  # either order: one pair
    return (
        len(rows),
        len({r.sentence_id for r in rows}),
        sum(r.matched for r in rows),
        sum(r.count_a for r in rows),
        sum(r.count_b for r in rows),
        sum(r.identical for r in rows),
        sorted(len(s) for s in pairs.values()),
    )


def _shown(fig) -> tuple:  # type: ignore[no-untyped-def]
    return (
        fig.records,
        fig.sentences,
        fig.counts.matched,
        fig.counts.gold,
        fig.counts.test,
        fig.identical,
        sorted(p.sentences for p in fig.pairs),
    )


def test_kept_sums_equal_a_recount_after_logs_drops_returns_and_removals(db, login, people) -> None:
    """After any mix of hand-ins (records logged), drops, returns, removed sentences and
    new sentences, the kept sums equal a recount from the records, for a reader who sees
    everything and for one still annotating some of the sentences (the blind rule); the
    same figures come out when every kept sum is forgotten first."""
    import random

    from app.services import blind, held
    from app.services.errors import Conflict

    rng = random.Random(17)
    corpus, sentences = make_corpus(db, [SENTENCE] * 8, labels=LABELS, tags=TAGS)
    assign(db, sentences, people.ann1, people.ann2)
    who = {"ann1": login("ann1"), "ann2": login("ann2")}
    users = {"ann1": people.ann1, "ann2": people.ann2}
    live = [s.id for s in sentences]
    # the adjudicator has a long queue elsewhere (rows that must not count in this corpus)
    _, elsewhere = make_corpus(db, [SENTENCE] * 40, name="Elsewhere", labels=LABELS, tags=TAGS)
    assign(db, elsewhere, people.adjudicator)
    document_id = sentences[0].document_id

    def check(what: str) -> None:
        db.expire_all()
        recorded = set(
            db.scalars(
                select(AgreementRecord.sentence_id).where(AgreementRecord.corpus_id == corpus.id)
            )
        )
        for viewer in (people.admin, people.adjudicator, people.ann1, people.ann2):
            hidden = blind.unfinished_sentences(db, viewer)
            assert agreement.hidden_from(db, corpus.id, viewer) == hidden & recorded
            if hidden & recorded and _recounted(db, corpus.id, hidden) != _recounted(
                db, corpus.id, set()
            ):
                hid_from.add(viewer.username)
            kept = agreement.corpus_figures(db, corpus.id, viewer=viewer)
            assert _shown(kept) == _recounted(db, corpus.id, hidden), (what, viewer.username)
            agreement._tallies.clear()
            fresh = agreement.corpus_figures(db, corpus.id, viewer=viewer)
            assert kept == fresh, (what, viewer.username)

    most = 0
    hid_from: set[str] = set()  # readers something was hidden from at a check
    worked = 0
    for step in range(80):
        db.expire_all()
        op = rng.choice(
            ["submit"] * 12 + ["drop", "remove", "add", "watch", "watch", "unwatch", "work", "work"]
        )
        if op == "submit" and live:
            sid = rng.choice(live)
            name = rng.choice(list(who))
            mine = db.scalar(
                select(Annotation).where(
                    Annotation.sentence_id == sid, Annotation.user_id == users[name].id
                )
            )
            if mine is None and db.get(Sentence, sid).state != "dropped":
                _submit(who[name], sid, rng.choice([TREE_A, TREE_B]))
        elif op == "watch":
            # the adjudicator is given a compared sentence as one more annotator: hidden
            # from them from now on
            compared = set(db.scalars(select(AgreementRecord.sentence_id))) & set(live)
            watcher = rng.choice([people.adjudicator, people.admin])
            watched = set(
                db.scalars(select(Assignment.sentence_id).where(Assignment.user_id == watcher.id))
            )
            if compared - watched:
                db.add(
                    Assignment(
                        sentence_id=rng.choice(sorted(compared - watched)),
                        user_id=watcher.id,
                    )
                )
                db.commit()
        elif op == "unwatch":
            # an assignment taken back
            taken = db.scalars(
                select(Assignment).where(
                    Assignment.user_id.in_([people.adjudicator.id, people.admin.id]),
                    Assignment.sentence_id.in_(live),
                )
            ).all()
            if taken:
                db.delete(rng.choice(sorted(taken, key=lambda a: a.sentence_id)))
                db.commit()
        elif op == "work":
            # the adjudicator or admin starts a tree of a compared sentence (assigned or
            # not), or moves one of theirs between handed in and not, or removes it
            watcher = rng.choice([people.adjudicator, people.admin])
            owns = db.scalars(
                select(Annotation)
                .where(Annotation.user_id == watcher.id, Annotation.sentence_id.in_(live))
                .order_by(Annotation.id)
            ).all()
            compared = sorted(set(db.scalars(select(AgreementRecord.sentence_id))) & set(live))
            if owns and rng.random() < 0.6:
                own = rng.choice(owns)
                if rng.random() < 0.3:
                    db.delete(own)
                else:
                    own.state = "draft" if own.state == "submitted" else "submitted"
            elif compared:
                sid = rng.choice(compared)
                if not any(a.sentence_id == sid for a in owns):
                    db.add(Annotation(sentence_id=sid, user_id=watcher.id, state="draft", head=0))
            db.commit()
            worked += 1
        elif op == "drop" and live:
            sid = rng.choice(live)
            try:
                if db.get(Sentence, sid).state == "dropped":
                    held.restore(db, sid, people.admin)
                else:
                    held.drop(db, sid, people.admin)
            except Conflict:
                db.rollback()
        elif op == "remove" and len(live) > 2:
            sid = live.pop(rng.randrange(len(live)))
            db.delete(db.get(Sentence, sid))
            db.commit()
        elif op == "add":
            extra = Sentence(
                corpus_id=corpus.id,
                document_id=document_id,
                position=100 + step,
                tokens=SENTENCE.split(),
                text=SENTENCE,
            )
            db.add(extra)
            db.commit()
            assign(db, [extra], people.ann1, people.ann2)
            live.append(extra.id)
        if step % 3 == 0:  # views in between and not: several changes at once too
            check(f"step {step}: {op}")
        most = max(most, db.scalar(select(func.count()).select_from(AgreementRecord)) or 0)
    check("the end")
    # the walk did log records, the watchers worked on compared sentences, and both had
    # figures with something hidden (fewer than everyone's) at some check
    assert most > 5 and worked > 5
    assert {people.adjudicator.username, people.admin.username} <= hid_from
