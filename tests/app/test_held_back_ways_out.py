"""Held-back sentences have a place and a way out: the sentence is ``held_back`` (not queued)
on the corpus pages and counted on Corpora, listed on Review with the reason and the note, and
an adjudicator releases it, or drops it (kept, out of queue, export and figures) and brings it
back. The sentences are invented (a ferry workshop's log)."""

from __future__ import annotations

import pytest
from sqlalchemy import select

from app.models import (
    ANN_DRAFT,
    SENT_DROPPED,
    SENT_HELD_BACK,
    SENT_IN_PROGRESS,
    SENT_QUEUED,
    Annotation,
    Event,
    Sentence,
)
from app.services.assignment import assign_sentences
from app.services.errors import BadInput
from tests.app.bench_helpers import assign, flat_text, make_corpus

NOTE = "'oilchange' should be two words"


def _hold(
    who,
    sentence_id: int,
    reason: str = "tokenization wrong",  # type: ignore[no-untyped-def]
    note: str = NOTE,
) -> None:
    resp = who.client.patch(
        f"/api/bench/{sentence_id}/note",
        json={"comment": note, "flag": reason},
        headers=who.headers(),
    )
    assert resp.status_code == 200, resp.text


def _setup(db, people, login):  # type: ignore[no-untyped-def]
    corpus, sentences = make_corpus(db)
    assign(db, sentences, people.ann1, people.ann2)
    held = sentences[0]
    _hold(login("ann1"), held.id)
    return corpus, sentences, held


def test_held_back_is_a_state_of_its_own_on_the_corpus_pages(db, people, login):
    corpus, sentences, held = _setup(db, people, login)
    db.expire_all()
    assert db.get(Sentence, held.id).state == SENT_HELD_BACK
    admin = login("admin")
    page = admin.client.get(f"/corpora/{corpus.id}?state=queued").text
    assert held.text not in page  # no longer listed as queued
    held_page = admin.client.get(f"/corpora/{corpus.id}?state=held_back").text
    assert held.text in held_page and 'class="state state-held_back">held back<' in held_page
    assert f'href="/review?corpus={corpus.id}#held"' in held_page
    overview = admin.client.get("/").text
    header = overview.split("<thead>", 1)[1].split("</thead>", 1)[0]
    row = overview.split(f'href="/corpora/{corpus.id}"', 1)[1].split("</tr>", 1)[0]
    columns = [c.strip() for c in header.split("<th")[1:]]
    cells = row.split('<td class="num">')[1:]
    held_col = next(i for i, c in enumerate(columns) if ">held back<" in c)
    # the counts line up with the headings after the corpus name column
    assert cells[held_col - 1].startswith("1<"), (columns, cells)


def test_review_lists_the_held_back_sentence_with_reason_and_note(db, people, login):
    corpus, sentences, held = _setup(db, people, login)
    adj = login("adj")
    page = adj.client.get(f"/review?corpus={corpus.id}").text
    section = page.split('id="held"', 1)[1].split("</section>", 1)[0]
    assert held.text in section and "tokenization wrong" in section
    assert "&#39;oilchange&#39; should be two words" in section and "Ann1" in section
    assert f'action="/review/held/{held.id}/release"' in section
    assert f'action="/review/held/{held.id}/drop"' in section
    # the adjudicator is not an annotator of it: the page names who fixes the tokens
    assert "ann1, ann2 can respell, split or join its words on the Bench" in section
    assert f'href="/bench/{held.id}?tokens"' not in section
    assert sentences[1].text not in section


def test_an_annotator_of_it_gets_the_token_fixer_link(db, people, login):
    corpus, sentences, held = _setup(db, people, login)
    people.ann2.role = "adjudicator"  # an adjudicator who also annotates this sentence
    db.commit()
    page = login("ann2").client.get(f"/review?corpus={corpus.id}").text
    section = page.split('id="held"', 1)[1].split("</section>", 1)[0]
    assert f'href="/bench/{held.id}?tokens"' in section
    assert login("ann2").client.get(f"/bench/{held.id}?tokens").status_code == 200


def test_release_sends_it_back_to_annotation(db, people, login):
    corpus, sentences, held = _setup(db, people, login)
    adj = login("adj")
    resp = adj.client.post(
        f"/review/held/{held.id}/release", data={"csrf_token": adj.csrf}, follow_redirects=False
    )
    assert resp.status_code == 303 and "done=released" in resp.headers["location"]
    db.expire_all()
    assert db.get(Sentence, held.id).state == SENT_QUEUED  # nobody had saved a tree
    ann = db.scalar(select(Annotation).where(Annotation.sentence_id == held.id))
    assert ann.state == ANN_DRAFT and ann.flag is None and ann.comment == NOTE
    event = db.scalar(select(Event).where(Event.kind == "sentence.released"))
    assert event.detail["holds"][0]["reason"] == "tokenization wrong"
    page = adj.client.get(resp.headers["location"]).text
    assert "back in annotation" in page
    # released twice: the second is refused, nothing changes
    again = adj.client.post(f"/api/review/{held.id}/release", json={}, headers=adj.headers())
    assert again.status_code == 409


def test_release_after_a_saved_tree_goes_back_in_progress(db, people, login):
    corpus, sentences, _ = _setup(db, people, login)
    s = sentences[1]
    ann2 = login("ann2")
    saved = ann2.client.post(
        f"/api/bench/{s.id}/revisions",
        json={"base": 0, "tree": flat_text(s.tokens)},
        headers=ann2.headers(),
    )
    assert saved.status_code == 201
    _hold(ann2, s.id, "needs a linguist", "")
    adj = login("adj")
    done = adj.client.post(
        f"/api/review/{s.id}/release", json={"note": "ask Ilsa"}, headers=adj.headers()
    )
    assert done.status_code == 200, done.text
    assert done.json()["state"] == SENT_IN_PROGRESS


def test_the_annotator_lifting_their_own_hold_reopens_the_sentence(db, people, login):
    corpus, sentences, held = _setup(db, people, login)
    ann1 = login("ann1")
    resp = ann1.client.patch(
        f"/api/bench/{held.id}/note", json={"clear_flag": True}, headers=ann1.headers()
    )
    assert resp.status_code == 200
    db.expire_all()
    assert db.get(Sentence, held.id).state == SENT_QUEUED


def test_a_second_hold_keeps_it_held_until_both_are_lifted(db, people, login):
    corpus, sentences, held = _setup(db, people, login)
    ann1, ann2 = login("ann1"), login("ann2")
    _hold(ann2, held.id, "not one sentence", "")
    ann1.client.patch(
        f"/api/bench/{held.id}/note", json={"clear_flag": True}, headers=ann1.headers()
    )
    db.expire_all()
    assert db.get(Sentence, held.id).state == SENT_HELD_BACK
    rows = login("adj").client.get(f"/review?corpus={corpus.id}").text
    assert "not one sentence" in rows


def test_drop_keeps_the_sentence_but_takes_it_out_of_the_work(db, people, login):
    corpus, sentences, held = _setup(db, people, login)
    adj = login("adj")
    resp = adj.client.post(
        f"/review/held/{held.id}/drop",
        data={"csrf_token": adj.csrf, "note": "a heading, not a sentence"},
        follow_redirects=False,
    )
    assert resp.status_code == 303
    db.expire_all()
    assert db.get(Sentence, held.id).state == SENT_DROPPED
    assert db.scalar(select(Annotation).where(Annotation.sentence_id == held.id)) is not None
    # out of both annotators' queues, refused on the Bench, never assigned again
    for name in ("ann1", "ann2"):
        who = login(name)
        queue = who.client.get("/api/queue").json()
        assert held.id not in [it["sentence_id"] for it in queue["items"]]
        assert held.text not in who.client.get("/queue").text
    ann2 = login("ann2")
    save = ann2.client.post(
        f"/api/bench/{held.id}/revisions",
        json={"base": 0, "tree": flat_text(held.tokens)},
        headers=ann2.headers(),
    )
    assert save.status_code == 409
    with pytest.raises(BadInput, match="not open"):
        assign_sentences(db, corpus.id, per_sentence=3, sentence_ids=[held.id])
    db.rollback()
    page = adj.client.get(f"/review?corpus={corpus.id}").text
    dropped = page.split('id="dropped"', 1)[1]
    assert held.text in dropped and f'action="/review/held/{held.id}/restore"' in dropped
    # bring it back: the hold is still on it, so it is held back again
    back = adj.client.post(
        f"/review/held/{held.id}/restore", data={"csrf_token": adj.csrf}, follow_redirects=False
    )
    assert back.status_code == 303
    db.expire_all()
    assert db.get(Sentence, held.id).state == SENT_HELD_BACK
    kinds = [
        e.kind
        for e in db.scalars(select(Event).where(Event.sentence_id == held.id).order_by(Event.id))
    ]
    assert kinds[-2:] == ["sentence.dropped", "sentence.restored"]


def test_annotators_cannot_release_or_drop(db, people, login):
    corpus, sentences, held = _setup(db, people, login)
    ann1 = login("ann1")
    resp = ann1.client.post(f"/api/review/{held.id}/drop", json={}, headers=ann1.headers())
    assert resp.status_code == 403
    db.expire_all()
    assert db.get(Sentence, held.id).state == SENT_HELD_BACK
