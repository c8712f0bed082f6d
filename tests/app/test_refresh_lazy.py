"""After a retraining only the next sentences of each annotator's queue are parsed under the
new grammar (a bounded look-ahead, app.services.refresh); every other sentence is parsed when
opened, a fixed start stays fixed, and the Bench never passes a suggestion of an inactive
grammar off as the active one's. Grammars trained on the demo's invented gold trees."""

from __future__ import annotations

import tempfile
from functools import lru_cache
from pathlib import Path

from sqlalchemy import select

from app.demo.loader import DEMO_DIR
from app.models import Corpus, Sentence, Suggestion
from app.routes.api_annotations import _suggestion_public
from app.services import refresh, suggestions
from parser.grammar import train_grammar
from parser.trees import read_trees
from tests.app.bench_helpers import assign, flat_text, install_grammar, make_corpus

#: Invented workshop notes, one sentence each.
TEXTS = [
    "The port engine was stopped for an oil change .",
    "Check the bilge pump before the first crossing .",
    "The spare propeller has not been delivered .",
    "Grease the winch on the lower deck .",
    "The ramp needs new hinges before winter .",
    "Two deckhands painted the railings on Tuesday .",
    "The radio in the wheelhouse keeps losing its signal .",
    "Order more rope for the mooring lines .",
    "The ferry left late because of the fog .",
    "Clean the filters after every tenth crossing .",
]


@lru_cache(maxsize=2)
def demo_grammar_bytes(files: int = 3) -> bytes:
    """A grammar trained on the first ``files`` demo gold files (invented sentences)."""
    trees = []
    for path in sorted(Path(DEMO_DIR).glob("gold_*.ptb"))[:files]:
        trees.extend(read_trees(path.read_text(encoding="utf-8")))
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "g.npz"
        train_grammar(trees).save(out)
        return out.read_bytes()


def _set(db, corpus: Corpus, **values) -> None:
    corpus.settings = {**corpus.settings, **values}
    db.commit()


def _parsed_under(db, version_id: int) -> set[int]:
    db.expire_all()
    return set(
        db.scalars(
            select(Suggestion.sentence_id).where(Suggestion.grammar_version_id == version_id)
        )
    )


def test_refresh_step_parses_each_queue_s_next_sentences_round_robin(db, people) -> None:
    corpus, sentences = make_corpus(db, TEXTS)
    assign(db, sentences[0:4], people.ann1)
    assign(db, sentences[4:8], people.ann2)
    _set(db, corpus, refresh_lookahead=2)
    version = install_grammar(db, corpus, demo_grammar_bytes())
    ids = [s.id for s in sentences]
    # everyone's first, then everyone's second: with room for three, ann1's second waits
    report = refresh.refresh_step(db, corpus, budget=3, k=2)
    assert report.parsed == 3 and report.wanted == 4
    assert _parsed_under(db, version.id) == {ids[0], ids[4], ids[1]}
    # the version has spent its budget: asking again with the same budget parses nothing
    again = refresh.refresh_step(db, corpus, budget=3, k=2)
    assert again.parsed == 0 and again.spent == 3
    # the default budget (2 annotators x look-ahead 2) takes the last one of the look-ahead
    rest = refresh.refresh_step(db, corpus, k=2)
    assert rest.budget == 4 and rest.parsed == 1
    assert _parsed_under(db, version.id) == {ids[0], ids[1], ids[4], ids[5]}
    db.refresh(version)
    assert version.options["refresh"]["parsed"] == 4
    # nothing beyond the look-ahead, whatever the budget
    assert refresh.refresh_step(db, corpus, budget=100, k=2).parsed == 0
    assert _parsed_under(db, version.id).isdisjoint({ids[2], ids[3], ids[6], ids[7]})


def test_lookahead_skips_finished_work_and_closed_sentences(db, people, login) -> None:
    corpus, sentences = make_corpus(db, TEXTS)
    assign(db, sentences[:5], people.ann1)
    _set(db, corpus, refresh_lookahead=2)
    sentences[0].state = "gold"
    db.commit()
    me = login("ann1")
    tree = "(ROOT (S " + " ".join(f"(NN {w})" for w in sentences[1].tokens) + "))"
    saved = me.client.post(
        f"/api/bench/{sentences[1].id}/revisions",
        json={"base": 0, "tree": tree},
        headers=me.headers(),
    )
    assert saved.status_code == 201, saved.text
    submitted = me.client.post(
        f"/api/bench/{sentences[1].id}/submit", json={"base": 1}, headers=me.headers()
    )
    assert submitted.status_code == 200, submitted.text
    ahead = refresh.lookahead(db, corpus, [people.ann1.id], 2)
    assert ahead == [sentences[2].id, sentences[3].id]


def test_refresh_budget_is_what_the_team_annotates_before_the_next_retraining(db, people) -> None:
    corpus, sentences = make_corpus(db, TEXTS)
    assign(db, sentences, people.ann1, people.ann2)
    _set(db, corpus, refresh_lookahead=10, retrain_every=3, retrain_every_early=0)
    _set(db, corpus, annotators_per_sentence=2)
    # three gold trees, two annotations each, before the next version: six sentences opened
    assert refresh.refresh_budget(db, corpus) == 6
    # automatic retraining off: the look-ahead alone bounds it (10 for each of 2 annotators)
    _set(db, corpus, retrain_every=0)
    assert refresh.refresh_budget(db, corpus) == 20
    _set(db, corpus, refresh_lookahead=0)
    assert refresh.refresh_budget(db, corpus) == 0


def test_lazy_refresh_never_shows_an_inactive_grammar_s_suggestion_as_fresh(
    db, people, login
) -> None:
    corpus, sentences = make_corpus(db, TEXTS)
    assign(db, sentences, people.ann1, people.ann2)
    _set(db, corpus, refresh_lookahead=1)
    v1 = install_grammar(db, corpus, demo_grammar_bytes(1))
    assert suggestions.refresh_unstarted(db, corpus, v1, k=2, processes=1) == len(sentences)
    # ann2 opens the fourth sentence under version 1: its start is fixed to version 1
    fixed = sentences[3]
    first = login("ann2").client.get(f"/api/bench/{fixed.id}").json()
    assert first["start_grammar_version"] == 1
    v1_start = first["tree"]
    # a retraining makes version 2 active; prune and the bounded refresh run as in the job
    v2 = install_grammar(db, corpus, demo_grammar_bytes(3), number=2)
    suggestions.prune(db, corpus, keep_grammars=5)
    db.commit()
    report = refresh.refresh_step(db, corpus, k=2)
    assert report.parsed == 1  # both annotators' next sentence is the same one
    assert _parsed_under(db, v2.id) == {sentences[0].id}
    # version 1's rows went, except the one the fixed start is taken from
    assert _parsed_under(db, v1.id) == {fixed.id}
    me = login("ann1")
    for s in sentences:
        body = me.client.get(f"/api/bench/{s.id}").json()
        sugg = body["suggestion"]
        assert sugg["grammar_version"] == 2 and sugg["stale"] is False, s.id
        if s.id == fixed.id:  # the fixed start is kept: every annotator starts alike
            assert body["start_grammar_version"] == 1 and body["tree"] == v1_start
        else:
            assert body["start_grammar_version"] == 2 and body["tree"] == sugg["consensus"]
    # opened sentences were parsed under version 2 on demand
    assert _parsed_under(db, v2.id) == {s.id for s in sentences}
    # a row of an inactive version that reached the Bench would be marked as such
    old = db.scalar(select(Suggestion).where(Suggestion.grammar_version_id == v1.id))
    shown = _suggestion_public(db, db.get(Corpus, corpus.id), old)
    assert shown is not None and shown.stale is True and shown.grammar_version == 1
    assert db.get(Sentence, fixed.id).start_grammar_version_id == v1.id


def _hand_in(who, sentence: Sentence) -> None:  # type: ignore[no-untyped-def]
    saved = who.client.post(
        f"/api/bench/{sentence.id}/revisions",
        json={"base": 0, "tree": flat_text(sentence.tokens)},
        headers=who.headers(),
    )
    assert saved.status_code == 201, saved.text
    done = who.client.post(
        f"/api/bench/{sentence.id}/submit",
        json={"base": saved.json()["annotation"]["head"]},
        headers=who.headers(),
    )
    assert done.status_code == 200, done.text


def _complete_under(db, version_id: int) -> set[int]:  # type: ignore[no-untyped-def]
    db.expire_all()
    return {
        row.sentence_id
        for row in db.scalars(select(Suggestion).where(Suggestion.grammar_version_id == version_id))
        if suggestions.is_complete(row)
    }


def test_a_hand_in_refreshes_the_next_sentences_of_that_queue(db, people, login) -> None:
    """After a hand-in the look-ahead moves: the next ``refresh_lookahead`` open sentences of
    the annotator's queue get a complete suggestion of the grammar active then (in the
    background, after the response), and nobody else's queue is parsed."""
    corpus, sentences = make_corpus(db, TEXTS)
    assign(db, sentences[0:6], people.ann1)
    assign(db, sentences[6:10], people.ann2)
    _set(db, corpus, refresh_lookahead=2)
    first = install_grammar(db, corpus, demo_grammar_bytes(3))
    ids = [s.id for s in sentences]
    ann1 = login("ann1")
    _hand_in(ann1, sentences[0])
    # the next two open sentences of ann1's queue, under the active version
    assert _complete_under(db, first.id) == {ids[1], ids[2]}
    # a new version becomes active: the next hand-in parses the look-ahead under it
    second = install_grammar(db, corpus, demo_grammar_bytes(2), number=2)
    _hand_in(ann1, sentences[1])
    assert _complete_under(db, second.id) == {ids[2], ids[3]}
    assert _complete_under(db, first.id) == {ids[1], ids[2]}  # nothing more under the old one
    # ann2's queue was not touched by ann1's hand-ins
    assert not (_parsed_under(db, second.id) | _parsed_under(db, first.id)) & set(ids[6:])
