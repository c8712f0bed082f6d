"""Time on task and edit effort: what the Bench sends with each save is stored on the revision,
summed per annotator and per corpus on the Agreement page and in its CSV, with the distance of
each handed-in tree from the tree it started from."""

from __future__ import annotations

import csv
import html
import io
import re

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
