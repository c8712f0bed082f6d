"""The demo loader: corpus, documents, gold, queued and assigned sentences, users, grammar."""

from __future__ import annotations

from collections import Counter

from sqlalchemy import select

from app.demo.loader import CORPUS_NAME, DEMO_DIR, is_demo_database, load_demo
from app.models import (
    ROLE_ADJUDICATOR,
    ROLE_ADMIN,
    ROLE_ANNOTATOR,
    SENT_GOLD,
    SENT_QUEUED,
    Assignment,
    Corpus,
    Document,
    Gold,
    Sentence,
    User,
)
from app.security import authenticate
from app.services.imports import import_bytes


def _lines(pattern: str) -> int:
    return sum(
        len([ln for ln in p.read_text().splitlines() if ln.strip()]) for p in DEMO_DIR.glob(pattern)
    )


def test_demo_loader_builds_the_corpus(db) -> None:
    summary = load_demo(db, train=False)
    corpus = db.scalar(select(Corpus))
    assert corpus.name == CORPUS_NAME
    docs = list(db.scalars(select(Document.name).order_by(Document.position)))
    assert docs == ["engine log", "committee minutes", "timetable notices"]
    states = Counter(db.scalars(select(Sentence.state)))
    assert states[SENT_GOLD] == _lines("gold_*.ptb") == summary.gold
    assert states[SENT_QUEUED] == _lines("raw_*.txt") == summary.queued
    assert set(db.scalars(select(Gold.provenance))) == {"import"}
    # the derived label set holds the demo's function-tagged labels
    assert "NP-SBJ" in corpus.label_set and "NN" in corpus.tag_set


def test_demo_loader_users_and_assignments(db) -> None:
    summary = load_demo(db, train=False)
    roles = {u.username: u.role for u in db.scalars(select(User))}
    assert sorted(roles.values()) == sorted([ROLE_ADMIN, ROLE_ANNOTATOR, ROLE_ADJUDICATOR])
    for username, _role, password in summary.logins:
        assert len(password) >= 12 and authenticate(db, username, password) is not None
    annotators = {u.id for u in db.scalars(select(User).where(User.role != ROLE_ADMIN))}
    per_sentence: dict[int, set[int]] = {}
    for sid, uid in db.execute(select(Assignment.sentence_id, Assignment.user_id)):
        per_sentence.setdefault(sid, set()).add(uid)
    queued = set(db.scalars(select(Sentence.id).where(Sentence.state == SENT_QUEUED)))
    assert set(per_sentence) == queued
    assert all(users == annotators for users in per_sentence.values())


def test_demo_loader_passwords_differ_each_time(db, tmp_path) -> None:
    first = load_demo(db, train=False)
    db.execute(User.__table__.delete())
    db.execute(Corpus.__table__.delete())
    db.commit()
    second = load_demo(db, train=False)
    assert [p for *_, p in first.logins] != [p for *_, p in second.logins]


def test_demo_database_detection(db) -> None:
    assert is_demo_database(db)  # empty
    load_demo(db, train=False)
    assert is_demo_database(db)
    import_bytes(db, b"Team data .\n", source="t.txt", corpus_name="Our own treebank")
    assert not is_demo_database(db)
