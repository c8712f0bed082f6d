"""Trees nested far too deep are refused at the door with a located 422, never a 500.

The reader (parser.trees) refuses brackets nested more than MAX_DEPTH levels; every entry
point that takes a tree is checked at 1,000 and 10,000 levels: a Bench save, the Review's
check and settle, the import API and the Transfer page. A gold tree stored before the limit
(written straight into the database here) must not make the export answer 500 nor fail every
retraining of its corpus.
"""

from __future__ import annotations

import pytest
from sqlalchemy import select

from app.models import GV_READY, Corpus, Gold, Sentence
from app.services.imports import import_bytes
from app.services.training import run_training
from parser.trees import MAX_DEPTH
from tests.app.bench_helpers import assign, make_corpus
from tests.app.review_helpers import import_demo_gold, submit_tree
from tests.app.row_counts import count_rows

DEPTHS = [1_000, 10_000]
WORDS = ["ahoy"]


def deep(depth: int, word: str = "ahoy") -> str:
    """A tree of ``depth`` levels: ROOT, then X nodes, then one preterminal."""
    inner = depth - 2
    return "(ROOT " + "(X " * inner + f"(UH {word})" + ")" * inner + ")"


def _refused(resp, depth: int) -> None:  # type: ignore[no-untyped-def]
    assert resp.status_code == 422, resp.text[:500]
    assert f"more than {MAX_DEPTH} levels" in resp.text
    assert "column" in resp.text


@pytest.fixture
def one_word(db, people):  # type: ignore[no-untyped-def]
    corpus, (sentence,) = make_corpus(db, [" ".join(WORDS)], labels=[], tags=[])
    assign(db, [sentence], people.ann1)
    return sentence


@pytest.mark.parametrize("depth", DEPTHS)
def test_deep_trees_save_is_refused(login, one_word, depth) -> None:
    me = login("ann1")
    resp = me.client.post(
        f"/api/bench/{one_word.id}/revisions",
        headers=me.headers(),
        json={"base": 0, "tree": deep(depth)},
    )
    _refused(resp, depth)
    assert me.client.get(f"/api/bench/{one_word.id}").json()["annotation"]["head"] == 0


@pytest.mark.parametrize("depth", DEPTHS)
def test_deep_trees_review_check_and_settle_are_refused(login, one_word, db, depth) -> None:
    submit_tree(login("ann1"), one_word.id, "(ROOT (UH ahoy))")
    db.refresh(one_word)
    assert one_word.state == "in_review"
    adj = login("adj")
    _refused(
        adj.client.post(
            f"/api/review/{one_word.id}/check", headers=adj.headers(), json={"tree": deep(depth)}
        ),
        depth,
    )
    _refused(
        adj.client.post(
            f"/api/review/{one_word.id}/settle", headers=adj.headers(), json={"tree": deep(depth)}
        ),
        depth,
    )
    assert db.scalar(select(Gold.id).where(Gold.sentence_id == one_word.id)) is None


def _gold_file(depth: int) -> bytes:
    return ("(ROOT (UH fine))\n" + deep(depth) + "\n").encode()


@pytest.mark.parametrize("depth", DEPTHS)
def test_deep_trees_import_api_is_refused_with_line(login, db, people, depth) -> None:
    admin = login("admin")
    before = count_rows(db)
    resp = admin.client.post(
        "/api/corpora/import",
        headers=admin.headers(),
        data={"corpus_name": "Soundings", "kind": "gold"},
        files={"upload": ("deep.ptb", _gold_file(depth))},
    )
    _refused(resp, depth)
    assert "line 2" in resp.text
    assert count_rows(db) == before


@pytest.mark.parametrize("depth", DEPTHS)
def test_deep_trees_import_page_is_refused_with_line(login, db, people, depth) -> None:
    admin = login("admin")
    before = count_rows(db)
    resp = admin.client.post(
        "/transfer/import",
        data={"csrf_token": admin.csrf, "new_corpus": "Soundings", "kind": "gold"},
        files={"upload": ("deep.ptb", _gold_file(depth))},
    )
    _refused(resp, depth)
    assert "line 2" in resp.text
    assert count_rows(db) == before


def _stored_deep_gold(db, depth: int) -> Sentence:  # type: ignore[no-untyped-def]
    """A corpus with the demo gold plus one too-deep gold tree written past the door."""
    corpus = import_demo_gold(db, "Soundings")
    import_bytes(
        db, b"(ROOT (UH ahoy))\n", source="extra.ptb", corpus_name="Soundings", kind="gold"
    )
    sentence = db.scalars(
        select(Sentence).where(Sentence.corpus_id == corpus.id).order_by(Sentence.id.desc())
    ).first()
    gold = db.scalar(select(Gold).where(Gold.sentence_id == sentence.id))
    gold.tree = deep(1_000)
    db.commit()
    return sentence


def test_deep_trees_stored_gold_export_answers_422_naming_the_sentence(login, db, people) -> None:
    sentence = _stored_deep_gold(db, 1_000)
    adj = login("adj")
    url = f"/api/corpora/{sentence.corpus_id}/export"
    stripped = adj.client.get(url + "?function_tags=false")
    assert stripped.status_code == 422, stripped.text[:300]
    assert f"sentence {sentence.id}" in stripped.text
    kept = adj.client.get(url)  # as stored: nothing to read, so nothing to refuse
    assert kept.status_code == 200


def test_deep_trees_stored_gold_does_not_fail_retraining(app, db, people) -> None:
    sentence = _stored_deep_gold(db, 1_000)
    corpus = db.get(Corpus, sentence.corpus_id)
    version = run_training(app.state.sessionmaker, corpus.id, reason="manual")
    assert version.status == GV_READY, version.message
