"""Time on task and edit effort: what the Bench sends with each save is stored on the revision,
summed per annotator and per corpus on the Agreement page and in its CSV, with the distance of
each handed-in tree from the tree it started from."""

from __future__ import annotations

import csv
import html
import io
import re

import pytest
from sqlalchemy import select

from app.models import Annotation, Revision
from app.services.effort import start_distance
from parser.scoring import score_pair
from parser.trees import read_tree
from tests.app.bench_helpers import assign, flat_text, make_corpus

SENTENCE = "Check the bilge pump before the first crossing ."
START = (
    "(ROOT (S (VP (VB Check) (NP (DT the) (NN bilge)) (NN pump) (PP (IN before) "
    "(NP (DT the) (JJ first) (NN crossing)))) (. .)))"
)
FINAL = (
    "(ROOT (S (VP (VB Check) (NP (DT the) (NN bilge) (NN pump)) (PP (IN before) "
    "(NP (DT the) (JJ first) (NN crossing)))) (. .)))"
)


def _save(me, sid, base, tree, **extra):
    resp = me.client.post(
        f"/api/bench/{sid}/revisions",
        headers=me.headers(),
        json={"base": base, "tree": tree, **extra},
    )
    assert resp.status_code == 201, resp.text
    return resp


def test_effort_is_stored_summed_and_shown(db, people, login) -> None:
    corpus, sentences = make_corpus(db, [SENTENCE, SENTENCE.replace("first", "last")])
    assign(db, sentences, people.ann1, people.ann2)
    ann1, ann2 = login("ann1"), login("ann2")
    s1, s2 = sentences
    _save(
        ann1,
        s1.id,
        0,
        START,
        source="suggestion",
        start=START,
        active_seconds=4.5,
        actions={"reading": 1},
    )
    _save(ann1, s1.id, 1, FINAL, active_seconds=30.0, actions={"edge": 1, "undo": 1, "add": 0})
    ann1.client.post(f"/api/bench/{s1.id}/submit", headers=ann1.headers(), json={"base": 2})
    flat2 = flat_text(s2.tokens)
    _save(
        ann1, s2.id, 0, flat2, source="flat", start=flat2, active_seconds=60.0, actions={"text": 1}
    )
    ann1.client.post(f"/api/bench/{s2.id}/submit", headers=ann1.headers(), json={"base": 1})
    _save(ann2, s1.id, 0, FINAL, source="text", active_seconds=10.0, actions={"text": 2})
    ann2.client.post(f"/api/bench/{s1.id}/submit", headers=ann2.headers(), json={"base": 1})

    a = db.scalar(
        select(Annotation).where(
            Annotation.user_id == people.ann1.id, Annotation.sentence_id == s1.id
        )
    )
    assert a.start_tree == START
    revs = db.scalars(
        select(Revision).where(Revision.annotation_id == a.id).order_by(Revision.number)
    ).all()
    assert [(r.active_seconds, r.actions) for r in revs] == [
        (4.5, {"reading": 1}),
        (30.0, {"edge": 1, "undo": 1}),
    ]

    # the distance from the start: PARSEVAL F1 computed here separately, and the edit count by
    # hand: NP 1-3 and NN pump outside it became NP 1-4 (two brackets differ), tags unchanged
    f1 = score_pair(read_tree(START), read_tree(FINAL)).labelled.f1
    assert start_distance(START, FINAL) == (f1, 2)

    body = login("admin").client.get(f"/agreement/effort.csv?corpus={corpus.id}").text
    rows = {r["annotator"]: r for r in csv.DictReader(io.StringIO(body))}
    one = rows["ann1"]
    assert (one["sentences"], one["words"], one["active_seconds"]) == ("2", "18", "94.5")
    assert float(one["sentences_per_hour"]) == round(2 / (94.5 / 3600), 2)
    assert float(one["seconds_per_word"]) == round(94.5 / 18, 2)
    assert (one["actions"], one["actions_per_sentence"]) == ("4", "2.00")
    assert one["actions_by_kind"] == "edge=1 reading=1 text=1 undo=1"
    # sentence 1 started from START (F1 f1, 2 edits), sentence 2 from its flat tree (F1 1, 0)
    assert one["compared_with_start"] == "2"
    assert float(one["mean_f1_to_start"]) == round((f1 + 1.0) / 2, 4)
    assert one["edits_from_start_per_sentence"] == "1.00"
    two = rows["ann2"]
    assert (two["sentences"], two["compared_with_start"], two["mean_f1_to_start"]) == (
        "1",
        "0",
        "",
    )  # no start sent: not compared
    everyone = rows["all annotators"]
    assert (everyone["sentences"], everyone["active_seconds"], everyone["actions"]) == (
        "3",
        "104.5",
        "6",
    )

    # the Agreement page shows the same figures as the CSV, cell for cell
    page = login("admin").client.get(f"/agreement?corpus={corpus.id}").text
    table = page[
        page.index('id="ag-effort"') : page.index("</table>", page.index('id="ag-effort"'))
    ]
    shown = [
        [html.unescape(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", tr)]
        for tr in re.findall(r"<tr[^>]*>(.*?)</tr>", table, re.S)
        if "<td" in tr
    ]
    in_csv = [
        [c if c != "" else "–" for c in row] for row in list(csv.reader(io.StringIO(body)))[1:]
    ]
    assert shown == in_csv and len(shown) == 3
    assert ["ann1", "2", "18", "94.5"] == shown[0][:4]


def test_effort_refuses_unknown_action_kinds(db, people, login) -> None:
    _corpus, sentences = make_corpus(db, [SENTENCE])
    assign(db, sentences, people.ann1)
    ann1 = login("ann1")
    resp = ann1.client.post(
        f"/api/bench/{sentences[0].id}/revisions",
        headers=ann1.headers(),
        json={"base": 0, "tree": FINAL, "actions": {"juggle": 2}},
    )
    assert resp.status_code == 422 and "juggle" in resp.text
    resp = ann1.client.post(
        f"/api/bench/{sentences[0].id}/revisions",
        headers=ann1.headers(),
        json={"base": 0, "tree": FINAL, "active_seconds": -1},
    )
    assert resp.status_code == 422
    assert db.scalars(select(Revision)).all() == []


def _figures(effort, db, corpus_id, afresh=False):
    how = effort.effort_afresh if afresh else effort.effort_figures
    people, total = how(db, corpus_id)
    return [vars(e) | {"by_kind": dict(e.by_kind)} for e in [*people, total]]


def test_kept_effort_shares_equal_a_recount_after_random_work(db, people, login) -> None:
    """The shares kept between views must equal a recount from the revisions after any mix of
    saves, hand-ins, token fixes, drops, restores and removals; a change the kept shares miss
    makes the two differ (the recount starts from nothing)."""
    import random

    from app.models import Sentence
    from app.services import effort, held
    from app.services.errors import Conflict

    rng = random.Random(17)
    corpus, sentences = make_corpus(
        db,
        [
            SENTENCE,
            SENTENCE.replace("first", "last"),
            "Stow the ropes before dark .",
            "Coil the line on the dock .",
            "Read the chart twice before leaving .",
        ],
    )
    assign(db, sentences, people.ann1, people.ann2)
    who = {"ann1": login("ann1"), "ann2": login("ann2")}
    users = {"ann1": people.ann1, "ann2": people.ann2}
    ids = [s.id for s in sentences]

    def same_after_recount(what: str) -> None:
        db.expire_all()
        kept = _figures(effort, db, corpus.id)
        recount = _figures(effort, db, corpus.id, afresh=True)
        assert kept == recount, what
        # a new process: nothing in memory, the sums stored in the database (nothing summed)
        effort.forget_cached_parts()
        summed = effort._summed
        calls: list[int] = []
        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(effort, "_summed", lambda *args: calls.append(1) or summed(*args))
            assert _figures(effort, db, corpus.id) == recount, what
        assert calls == [], what

    # first a fixed path through a handed-in tree changing under kept shares: ann2 hands in,
    # ann1's token fix sends it back to draft, ann2 saves on the new tokens and hands in again
    s1 = sentences[0]
    one, two = who["ann1"], who["ann2"]
    _save(two, s1.id, 0, flat_text(s1.tokens), start=flat_text(s1.tokens), active_seconds=5.0)
    assert two.client.post(
        f"/api/bench/{s1.id}/submit", headers=two.headers(), json={"base": 1}
    ).is_success
    _save(one, s1.id, 0, flat_text(s1.tokens), active_seconds=1.0)
    same_after_recount("ann2 handed in")
    fixed = one.client.post(
        f"/api/bench/{s1.id}/tokens",
        headers=one.headers(),
        json={"base": 1, "position": 2, "count": 2, "tokens": ["bilgepump"]},
    )
    assert fixed.status_code == 201, fixed.text
    # (no view in between: the kept share of ann2's first hand-in is still there)
    tokens = fixed.json()["tokens"]
    _save(two, s1.id, 1, flat_text(tokens), active_seconds=7.0, actions={"text": 1})
    assert two.client.post(
        f"/api/bench/{s1.id}/submit", headers=two.headers(), json={"base": 2}
    ).is_success
    same_after_recount("ann2 handed in again on the new tokens")

    done = 0
    for _step in range(150):
        db.expire_all()
        name = rng.choice(list(who))
        me, sid = who[name], rng.choice(ids)
        sentence = db.get(Sentence, sid)
        ann = db.scalar(
            select(Annotation).where(
                Annotation.user_id == users[name].id, Annotation.sentence_id == sid
            )
        )
        head = ann.head if ann is not None else 0
        op = rng.choice(["save"] * 4 + ["submit"] * 3 + ["tokens"] * 2 + ["drop", "remove"])
        if op == "save":
            flat = flat_text(sentence.tokens)
            me.client.post(
                f"/api/bench/{sid}/revisions",
                headers=me.headers(),
                json={
                    "base": head,
                    "tree": flat,
                    "start": flat,
                    "active_seconds": rng.choice([0.5, 3.0, 12.25]),
                    "actions": {rng.choice(["edge", "text", "undo"]): rng.randint(1, 3)},
                },
            )
        elif op == "submit" and head:
            r = me.client.post(
                f"/api/bench/{sid}/submit", headers=me.headers(), json={"base": head}
            )
            done += r.status_code == 200
        elif op == "tokens" and head and len(sentence.tokens) > 3:
            me.client.post(
                f"/api/bench/{sid}/tokens",
                headers=me.headers(),
                json={
                    "base": head,
                    "position": 1,
                    "count": 2,
                    "tokens": [sentence.tokens[1] + sentence.tokens[2]],
                    "active_seconds": 2.0,
                },
            )
        elif op == "drop":
            try:
                if sentence.state == "dropped":
                    held.restore(db, sid, people.admin)
                else:
                    held.drop(db, sid, people.admin)
            except Conflict:  # a state that cannot move that way: nothing changed
                db.rollback()
        elif op == "remove" and ann is not None:
            db.delete(ann)
            db.commit()
        same_after_recount(f"step {_step}: {op}")
    assert done >= 3  # the walk did hand work in, so the sums were not empty throughout


def test_a_new_process_computes_only_the_shares_changed_since_they_were_stored(
    db, people, login
) -> None:
    """The shares a view computed are stored with their fingerprints: a process with
    nothing in memory, after another hand-in, computes only that hand-in's share, and its
    figures equal a recount from the revisions."""
    from app.services import effort

    corpus, sentences = make_corpus(
        db, [SENTENCE, SENTENCE.replace("first", "last"), SENTENCE.replace("first", "next")]
    )
    assign(db, sentences, people.ann1)
    ann1 = login("ann1")

    def hand_in(sentence, seconds: float) -> int:
        _save(ann1, sentence.id, 0, flat_text(sentence.tokens), active_seconds=seconds)
        done = ann1.client.post(
            f"/api/bench/{sentence.id}/submit", headers=ann1.headers(), json={"base": 1}
        )
        assert done.status_code == 200, done.text
        return int(done.json()["id"])

    hand_in(sentences[0], 3.0)
    hand_in(sentences[1], 5.0)
    assert _figures(effort, db, corpus.id) == _figures(effort, db, corpus.id, afresh=True)
    effort.forget_cached_parts()  # a new process
    third = hand_in(sentences[2], 7.0)
    computed: list[int] = []
    compute = effort._compute_parts

    def counted(db, anns):  # type: ignore[no-untyped-def]
        computed.extend(a.id for a in anns)
        return compute(db, anns)

    db.expire_all()
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(effort, "_compute_parts", counted)
        shown = _figures(effort, db, corpus.id)
    assert computed == [third]
    assert shown == _figures(effort, db, corpus.id, afresh=True)
    assert shown[-1]["sentences"] == 3 and shown[-1]["seconds"] == 15.0
