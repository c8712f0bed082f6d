"""Suggestions: parsed once, cached in the Suggestion table, k alternatives with
probabilities, posteriors; refresh_unstarted after a new grammar; the per-process grammar
cache. Grammar trained on a slice of GUM (Zeldes 2017, CC BY)."""

from __future__ import annotations

import math

from sqlalchemy import func, select

from app.models import Suggestion
from app.services import suggestions
from parser.trees import constituents, read_tree
from tests.app.bench_helpers import (
    assign,
    flat_text,
    gum_grammar_bytes,
    install_grammar,
    make_corpus,
)


def _world(db, people):
    corpus, sentences = make_corpus(db, labels=[], tags=[])
    assign(db, sentences, people.ann1)
    version = install_grammar(db, corpus, gum_grammar_bytes())
    return corpus, sentences, version


def _count(db) -> int:
    db.expire_all()
    return db.scalar(select(func.count()).select_from(Suggestion))


def test_suggestions_new_annotation_starts_from_consensus_and_is_cached(
    db, people, login, settings
) -> None:
    _, sentences, _ = _world(db, people)
    me = login("ann1")
    s = sentences[0]
    first = me.client.get(f"/api/bench/{s.id}").json()
    assert first["source"] == "suggestion"
    sugg = first["suggestion"]
    # The first opening fixes the sentence's start, so it parses completely once: the
    # consensus tree is the start, and the row is complete.
    assert sugg["grammar_version"] == 1 and sugg["fallback"] is False
    assert sugg["complete"] is True and sugg["posteriors"]
    assert len(sugg["alternatives"]) == settings.suggestion_k
    assert first["tree"] == sugg["consensus"]
    assert first["start_kind"] == "consensus" and first["start_grammar_version"] == 1
    probs = [a["probability"] for a in sugg["alternatives"]]
    assert all(0 < p <= 1 for p in probs)
    assert probs == sorted(probs, reverse=True)
    assert sum(probs) <= 1 + 1e-6  # distinct trees of one sentence
    assert len({a["tree"] for a in sugg["alternatives"]}) == len(probs)
    assert _count(db) == 1
    full = me.client.get(f"/api/bench/{s.id}/suggestion").json()
    assert full == sugg and _count(db) == 1
    again = me.client.get(f"/api/bench/{s.id}").json()
    assert again["suggestion"] == full and again["tree"] == first["tree"] and _count(db) == 1


def test_suggestions_posteriors_cover_the_root_and_the_best_tree(db, people, login) -> None:
    _, sentences, _ = _world(db, people)
    me = login("ann1")
    s = sentences[1]
    body = me.client.get(f"/api/bench/{s.id}").json()
    full = me.client.get(f"/api/bench/{s.id}/suggestion").json()
    post = {(lab, a, b): p for lab, a, b, p in full["posteriors"]}
    n = len(s.tokens)
    assert math.isclose(post[("ROOT", 0, n)], 1.0, abs_tol=1e-3)
    assert all(0 < p <= 1 + 1e-6 for p in post.values())
    # every constituent of the Viterbi tree has a posterior above the parser's threshold
    best = read_tree(body["tree"])
    for lab, a, b in constituents(best):
        assert (lab, a, b) in post


def test_suggestions_without_grammar_is_null(db, people, login) -> None:
    _, sentences = make_corpus(db, name="No grammar")
    assign(db, sentences, people.ann1)
    me = login("ann1")
    resp = me.client.get(f"/api/bench/{sentences[0].id}/suggestion")
    assert resp.status_code == 200 and resp.json() is None


def test_suggestions_returning_annotator_gets_their_revision_not_the_suggestion(
    db, people, login
) -> None:
    _, sentences, _ = _world(db, people)
    me = login("ann1")
    s = sentences[2]
    mine = flat_text(s.tokens, ["DT", "JJ", "NN", "VBZ", "RB", "VBN", "VBN", "."])
    me.client.post(
        f"/api/bench/{s.id}/revisions", headers=me.headers(), json={"base": 0, "tree": mine}
    )
    body = me.client.get(f"/api/bench/{s.id}").json()
    assert body["tree"] == mine and body["source"] == "edit"
    assert body["suggestion"] is not None  # still offered as alternatives


def test_suggestions_refresh_unstarted_skips_started_sentences(db, people, login) -> None:
    corpus, sentences, _ = _world(db, people)
    me = login("ann1")
    started = sentences[0]
    me.client.post(
        f"/api/bench/{started.id}/revisions",
        headers=me.headers(),
        json={"base": 0, "tree": flat_text(started.tokens)},
    )
    newer = install_grammar(db, corpus, gum_grammar_bytes(), number=2)
    done = suggestions.refresh_unstarted(db, corpus, newer, k=3, processes=1)
    assert done == len(sentences) - 1
    rows = db.scalars(select(Suggestion).where(Suggestion.grammar_version_id == newer.id)).all()
    assert {r.sentence_id for r in rows} == {s.id for s in sentences[1:]}
    assert all(len(r.trees) == 3 and suggestions.is_complete(r) for r in rows)
    assert suggestions.refresh_unstarted(db, corpus, newer, k=3, processes=1) == 0
    # the Bench now uses the cached row of the new version without parsing again
    before = _count(db)
    body = me.client.get(f"/api/bench/{sentences[1].id}").json()
    assert body["suggestion"]["grammar_version"] == 2 and _count(db) == before


def test_suggestions_grammar_is_loaded_once_per_process(db, people) -> None:
    _, _, version = _world(db, people)
    suggestions.forget_grammars()
    first = suggestions.grammar_for(db, version.id)
    assert suggestions.grammar_for(db, version.id) is first
    suggestions.forget_grammars()
    assert suggestions.grammar_for(db, version.id) is not first


def test_suggestions_refresh_unstarted_skips_gold_and_review(db, people) -> None:
    from app.models import SENT_GOLD, SENT_IN_REVIEW

    corpus, sentences, _ = _world(db, people)
    sentences[0].state = SENT_GOLD
    sentences[1].state = SENT_IN_REVIEW
    db.commit()
    newer = install_grammar(db, corpus, gum_grammar_bytes(), number=2)
    done = suggestions.refresh_unstarted(db, corpus, newer, k=2, processes=1)
    rows = db.scalars(select(Suggestion).where(Suggestion.grammar_version_id == newer.id)).all()
    assert done == len(sentences) - 2
    assert {r.sentence_id for r in rows} == {s.id for s in sentences[2:]}


def test_suggestions_consensus_is_the_start_tree_once_complete(db, people, login) -> None:
    _, sentences, _ = _world(db, people)
    me = login("ann1")
    s = sentences[2]
    full = me.client.get(f"/api/bench/{s.id}/suggestion").json()
    consensus = read_tree(full["consensus"])
    assert consensus.leaves() == s.tokens
    # Every bracket of the consensus has a posterior above the parser's bracket cost
    # (parser.consensus.DEFAULT_COST); the root is the grammar's.
    post = {(lab, a, b): p for lab, a, b, p in full["posteriors"]}
    from parser.consensus import DEFAULT_COST

    for lab, a, b in constituents(consensus):
        if (lab, a, b) != ("ROOT", 0, len(s.tokens)):
            assert post[(lab, a, b)] > DEFAULT_COST
    # A sentence nobody has started starts from the consensus tree.
    other = sentences[3]
    body = me.client.get(f"/api/bench/{other.id}").json()
    assert body["tree"] == body["suggestion"]["consensus"]
    assert body["start_note"].startswith("Consensus")
