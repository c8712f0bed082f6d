"""Constrained re-parse through the API keeps every pin: 50 held-out GUM sentences (Zeldes
2017, CC BY; ../shared/data/gum-trees) with random pinned constituents and POS tags taken from
their gold trees."""

from __future__ import annotations

import pytest

from parser.trees import constituents, pos_tags, read_tree, words
from tests.app.bench_helpers import (
    assign,
    gum_grammar_bytes,
    gum_sentence_corpus,
    heldout_gum_trees,
    install_grammar,
)


@pytest.fixture
def gum_bench(db, people, login):
    corpus, pairs = gum_sentence_corpus(
        db, heldout_gum_trees(50, min_words=4, max_words=30), people.ann1
    )
    install_grammar(db, corpus, gum_grammar_bytes())
    return login("ann1"), pairs


@pytest.mark.slow
def test_suggestions_reparse_keeps_every_pin_on_50_gum_sentences(gum_bench, rng) -> None:
    me, pairs = gum_bench
    assert len(pairs) == 50
    pinned_spans = pinned_tags = 0
    for sentence, gold in pairs:
        spans = [(s, e, lab) for lab, s, e in constituents(gold)[1:]]
        chosen = rng.sample(spans, min(len(spans), rng.randint(1, 3)))
        tags = list(enumerate(pos_tags(gold)))
        chosen_tags = rng.sample(tags, rng.randint(0, 2))
        pins = {
            "spans": [[s, e, lab] for s, e, lab in chosen],
            "tags": [[i, t] for i, t in chosen_tags],
        }
        resp = me.client.post(
            f"/api/bench/{sentence.id}/reparse", headers=me.headers(), json={"pins": pins}
        )
        assert resp.status_code == 200, (sentence.text, pins, resp.text)
        tree = read_tree(resp.json()["trees"][0])
        assert words(tree) == words(gold)
        have = set(constituents(tree))
        for s, e, lab in chosen:
            assert (lab, s, e) in have, (sentence.text, pins, resp.json()["trees"][0])
        got_tags = pos_tags(tree)
        for i, t in chosen_tags:
            assert got_tags[i] == t
        pinned_spans += len(chosen)
        pinned_tags += len(chosen_tags)
        # the server accepts the re-parsed tree with those pins as a revision
        saved = me.client.post(
            f"/api/bench/{sentence.id}/revisions",
            headers=me.headers(),
            json={"base": 0, "tree": resp.json()["trees"][0], "pins": pins, "source": "reparse"},
        )
        assert saved.status_code == 201, saved.text
    assert pinned_spans >= 50


def test_suggestions_reparse_without_pins_is_the_start_suggestion(gum_bench) -> None:
    me, pairs = gum_bench
    sentence = pairs[0][0]
    bench = me.client.get(f"/api/bench/{sentence.id}").json()
    resp = me.client.post(
        f"/api/bench/{sentence.id}/reparse",
        headers=me.headers(),
        json={"pins": {"spans": [], "tags": []}, "k": 3},
    )
    body = resp.json()
    # the proposal is the consensus tree, the readings the k best
    assert body["trees"][0] == bench["suggestion"]["consensus"] == bench["tree"]
    assert [r["tree"] for r in body["readings"]] == [
        a["tree"] for a in bench["suggestion"]["alternatives"][:3]
    ]
    assert body["plausible"] is True and body["reasons"] == []
    # sent with the tree it would re-parse, it says nothing would change
    again = me.client.post(
        f"/api/bench/{sentence.id}/reparse",
        headers=me.headers(),
        json={"pins": {}, "tree": bench["tree"]},
    ).json()
    assert again["changes"]["count"] == 0 and "nothing would change" in again["summary"]


def test_suggestions_reparse_refuses_crossing_or_outside_pins(gum_bench) -> None:
    me, pairs = gum_bench
    sentence = next(s for s, g in pairs if len(s.tokens) >= 6)
    url = f"/api/bench/{sentence.id}/reparse"
    crossing = me.client.post(
        url,
        headers=me.headers(),
        json={"pins": {"spans": [[0, 3, "NP"], [2, 5, "VP"]], "tags": []}},
    )
    assert crossing.status_code == 422 and crossing.json()["kind"] == "pins"
    assert "cross" in crossing.json()["detail"]
    outside = me.client.post(
        url, headers=me.headers(), json={"pins": {"spans": [[0, 99, "NP"]], "tags": []}}
    )
    assert outside.status_code == 422 and "outside" in outside.json()["detail"]


def test_suggestions_reparse_without_grammar_is_409(db, people, login) -> None:
    from tests.app.bench_helpers import make_corpus

    _, sentences = make_corpus(db)
    assign(db, sentences, people.ann1)
    me = login("ann1")
    resp = me.client.post(
        f"/api/bench/{sentences[0].id}/reparse",
        headers=me.headers(),
        json={"pins": {"spans": [], "tags": []}},
    )
    assert resp.status_code == 409 and resp.json()["kind"] == "no_grammar"


def test_suggestions_reparse_keeps_a_label_the_grammar_never_saw(gum_bench) -> None:
    me, pairs = gum_bench
    sentence, gold = next((s, g) for s, g in pairs if len(s.tokens) >= 5)
    pins = {"spans": [[1, 3, "NP-ODDITY"]], "tags": [[0, "NN-ODD"]]}
    resp = me.client.post(
        f"/api/bench/{sentence.id}/reparse", headers=me.headers(), json={"pins": pins}
    )
    assert resp.status_code == 200, resp.text
    tree = read_tree(resp.json()["trees"][0])
    assert ("NP-ODDITY", 1, 3) in constituents(tree)
    assert pos_tags(tree)[0] == "NN-ODD"


def test_suggestions_reparse_uses_everything_said_not_only_pins(gum_bench) -> None:
    me, pairs = gum_bench
    sentence = next(s for s, g in pairs if len(s.tokens) >= 10)
    bench = me.client.get(f"/api/bench/{sentence.id}").json()
    start = read_tree(bench["tree"])
    brackets = [(lab, s, e) for lab, s, e in constituents(start)[1:] if e - s > 1]
    removed = brackets[-1]
    relabelled = next(b for b in brackets if b[1:] != removed[1:])
    tags = pos_tags(start)
    new_tag = "NN" if tags[0] != "NN" else "JJ"
    pins = {
        "edited_spans": [[relabelled[1], relabelled[2], "FRAG"]],
        "edited_tags": [[0, new_tag]],
        "removed_spans": [[removed[1], removed[2]]],
    }
    body = me.client.post(
        f"/api/bench/{sentence.id}/reparse",
        headers=me.headers(),
        json={"pins": pins, "k": 3, "tree": bench["tree"]},
    ).json()
    for text in body["trees"]:
        tree = read_tree(text)
        spans = set(constituents(tree))
        assert ("FRAG", relabelled[1], relabelled[2]) in spans
        assert not any((s, e) == removed[1:] for _, s, e in spans)
        assert pos_tags(tree)[0] == new_tag
    assert body["changes"]["count"] >= 2  # at least the relabel and the retag
    assert body["summary"].startswith(
        "Re-parsed with grammar version 1 around 1 bracket, 1 removed bracket, 1 tag you set:"
    )
    # a word said to carry two tags is refused, naming the word
    bad = me.client.post(
        f"/api/bench/{sentence.id}/reparse",
        headers=me.headers(),
        json={"pins": {"tags": [[0, "NN"]], "edited_tags": [[0, "VB"]]}},
    )
    assert bad.status_code == 422 and "word 1" in bad.json()["detail"]
