"""Assignment: N annotators per open sentence, balanced, never the same person twice, idempotent."""

from __future__ import annotations

from collections import Counter

import pytest
from sqlalchemy import func, select

from app.models import ROLE_ANNOTATOR, SENT_GOLD, Assignment, Corpus, Sentence, User
from app.services.assignment import assign_sentences
from app.services.errors import BadInput, NotFound
from app.services.imports import import_bytes
from tests.app.conftest import PASSWORD_HASH


def _corpus(db, n: int = 30) -> int:
    text = "".join(f"Sentence number {i} is here .\n" for i in range(n))
    import_bytes(db, text.encode(), source="s.txt", corpus_name="Team")
    return db.scalar(select(Corpus.id))


def _pairs(db) -> dict[int, list[int]]:
    out: dict[int, list[int]] = {}
    for sid, uid in db.execute(select(Assignment.sentence_id, Assignment.user_id)):
        out.setdefault(sid, []).append(uid)
    return out


def test_assignment_gives_each_sentence_two_distinct_people(db, people) -> None:
    cid = _corpus(db)
    result = assign_sentences(db, cid)
    db.commit()
    pairs = _pairs(db)
    assert len(pairs) == 30 and result.created == 60
    assert all(len(users) == 2 == len(set(users)) for users in pairs.values())
    # the team is the active annotators and adjudicators; the admin is not in it
    everyone = {u for users in pairs.values() for u in users}
    assert everyone == {people.adjudicator.id, people.ann1.id, people.ann2.id}


def test_assignment_is_balanced(db, people) -> None:
    cid = _corpus(db)
    assign_sentences(db, cid)
    load = Counter(uid for users in _pairs(db).values() for uid in users)
    # 60 places over 3 people: 20 each
    assert sorted(load.values()) == [20, 20, 20]


def test_assignment_is_idempotent(db, people) -> None:
    cid = _corpus(db)
    assign_sentences(db, cid)
    db.commit()
    before = _pairs(db)
    again = assign_sentences(db, cid)
    assert again.created == 0 and again.already_complete == 30
    assert _pairs(db) == before


def test_assignment_tops_up_and_skips_gold(db, people) -> None:
    cid = _corpus(db, 4)
    first, second, third, fourth = db.scalars(select(Sentence).order_by(Sentence.position))
    db.add(Assignment(sentence_id=first.id, user_id=people.ann1.id))
    third.state = SENT_GOLD
    db.commit()
    assign_sentences(db, cid)
    pairs = _pairs(db)
    assert people.ann1.id in pairs[first.id] and len(pairs[first.id]) == 2
    assert third.id not in pairs
    assert len(pairs[second.id]) == len(pairs[fourth.id]) == 2


def test_assignment_reports_sentences_the_team_cannot_fill(db, people) -> None:
    cid = _corpus(db, 3)
    result = assign_sentences(db, cid, per_sentence=4)
    assert len(result.short) == 3 and result.created == 9
    assert all(len(set(u)) == 3 for u in _pairs(db).values())


def test_assignment_to_named_users_and_skips_disabled(db, people) -> None:
    cid = _corpus(db, 5)
    people.ann2.active = False
    db.add(User(username="ann3", role=ROLE_ANNOTATOR, password_hash=PASSWORD_HASH))
    db.commit()
    assign_sentences(db, cid, per_sentence=1, usernames=["ann1", "ann3"])
    assert db.scalar(select(func.count()).select_from(Assignment)) == 5
    with pytest.raises(BadInput, match="disabled"):
        assign_sentences(db, cid, usernames=["ann2"])
    with pytest.raises(NotFound, match="ghost"):
        assign_sentences(db, cid, usernames=["ghost"])


def test_assignment_counts_existing_load_from_other_sentences(db, people) -> None:
    cid = _corpus(db, 6)
    sentences = list(db.scalars(select(Sentence).order_by(Sentence.position)))
    for s in sentences[:3]:  # ann1 already carries three open sentences alone
        db.add(Assignment(sentence_id=s.id, user_id=people.ann1.id))
    db.commit()
    assign_sentences(db, cid, per_sentence=1, sentence_ids=[s.id for s in sentences[3:]])
    newcomers = Counter(uid for s in sentences[3:] for uid in _pairs(db)[s.id])
    assert people.ann1.id not in newcomers  # the least loaded get the new work
