"""Plain or refined grammar chosen by held-out F1 at each retraining, and the Bench working
with a refined grammar (suggestion, k best readings, constrained re-parse keeping the pins).

The corpus of the first test is the demo's invented gold; the Bench test uses held-out GUM
sentences (Zeldes 2017, CC BY; ../shared/data/gum-trees).
"""

from __future__ import annotations

import pytest

from app.models import GrammarVersion
from app.services import training
from app.services.suggestions import grammar_from_bytes
from parser.latent import is_refined, train_refined
from parser.trees import constituents, pos_tags, read_tree, read_trees, words
from tests.app.bench_helpers import gum_sentence_corpus, heldout_gum_trees, install_grammar
from tests.app.review_helpers import import_demo_gold


def _stored(db, version_id: int):
    return grammar_from_bytes(db.get(GrammarVersion, version_id).data)


def test_retraining_chooses_plain_or_refined_by_heldout_f1(app, db):
    corpus = import_demo_gold(
        db, settings={"retrain_every": 0, "refine_min_gold": 20, "refine_cycles": 2}
    )
    v = training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    record = v.options["refinement"]
    assert set(record["heldout_f1"]) == {"1", "2"}
    grammar = _stored(db, v.id)
    best = max(record["heldout_f1"].values())
    if record["chosen"]:
        # the stored grammar is the refined one and the version carries its held-out F1
        assert is_refined(grammar)
        assert record["heldout_f1"][str(record["chosen"])] == best > record["plain_f1"]
        assert v.heldout_f1 == pytest.approx(best, abs=1e-5)
    else:
        assert not is_refined(grammar)
        assert best <= record["plain_f1"]
        assert v.heldout_f1 == pytest.approx(record["plain_f1"], abs=1e-5)


def test_small_corpora_are_not_refined(app, db):
    corpus = import_demo_gold(db, settings={"retrain_every": 0})
    v = training.run_training(app.state.sessionmaker, corpus.id, reason="test")
    assert v.options["refinement"]["chosen"] == 0
    assert "needs 500" in v.options["refinement"]["reason"]
    assert not is_refined(_stored(db, v.id))


@pytest.fixture
def refined_bench(db, people, login):
    from tests.shared_data import gum_files

    train = [t for p in gum_files()[:8] for t in read_trees(p.read_text(encoding="utf-8"))]
    data = training.grammar_bytes(train_refined(train, 1))
    corpus, pairs = gum_sentence_corpus(
        db, heldout_gum_trees(12, min_words=4, max_words=25), people.ann1, name="GUM refined"
    )
    install_grammar(db, corpus, data)
    return login("ann1"), pairs


def test_bench_suggests_and_reparses_with_a_refined_grammar(refined_bench, rng):
    me, pairs = refined_bench
    for sentence, gold in pairs:
        bench = me.client.get(f"/api/bench/{sentence.id}").json()
        assert words(read_tree(bench["tree"])) == words(gold)
        full = me.client.get(f"/api/bench/{sentence.id}/suggestion").json()
        assert full["consensus"] and len(full["alternatives"]) >= 2
        spans = [(s, e, lab) for lab, s, e in constituents(gold)[1:]]
        chosen = rng.sample(spans, min(len(spans), 2))
        i, tag = rng.choice(list(enumerate(pos_tags(gold))))
        pins = {"spans": [[s, e, lab] for s, e, lab in chosen], "tags": [[i, tag]]}
        resp = me.client.post(
            f"/api/bench/{sentence.id}/reparse", headers=me.headers(), json={"pins": pins}
        )
        assert resp.status_code == 200, resp.text
        tree = read_tree(resp.json()["trees"][0])
        have = set(constituents(tree))
        for s, e, lab in chosen:
            assert (lab, s, e) in have
        assert pos_tags(tree)[i] == tag
