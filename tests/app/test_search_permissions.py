"""Search through the service and the API: what each role may see, the state filter, pages,
the export, and errors that say what is wrong and where."""

from __future__ import annotations

import pytest
from sqlalchemy.orm import Session

from app.models import ANN_DRAFT, Annotation, Assignment, Corpus, Revision, Sentence, User
from app.services import search as svc
from app.services.errors import BadInput, Forbidden
from tests.app.quality_helpers import GOLD, import_gold

NOTE_TEXT = "the mate rang the bell twice ."
ANN1_TREE = (
    "(ROOT (S (NP (DT the) (NN mate)) (VP (VBD rang) (NP (DT the) (NN bell)) "
    "(ADVP (RB twice))) (. .)))"
)
ANN2_TREE = (
    "(ROOT (S (NP (DT the) (NN mate)) (VP (VBD rang) (ADJP (DT the) (NN bell)) "
    "(ADVP (RB twice))) (. .)))"
)


def _draft(db: Session, sentence: Sentence, user: User, tree: str) -> Annotation:
    # assigned, as a draft is in practice (the assignment makes the annotator a member)
    db.add(Assignment(sentence_id=sentence.id, user_id=user.id))
    ann = Annotation(sentence_id=sentence.id, user_id=user.id, state=ANN_DRAFT, head=1)
    db.add(ann)
    db.flush()
    db.add(Revision(annotation_id=ann.id, number=1, tree=tree, source="edit", user_id=user.id))
    db.commit()
    return ann


@pytest.fixture
def world(db: Session, people) -> tuple[Corpus, list[Sentence]]:  # type: ignore[no-untyped-def]
    from app.services.imports import import_bytes

    corpus, sentences = import_gold(db)
    import_bytes(
        db, (NOTE_TEXT + "\n").encode(), source="raw.txt", corpus_name=corpus.name, kind="text"
    )
    db.refresh(corpus)
    raw = (
        db.query(Sentence).filter(Sentence.corpus_id == corpus.id, Sentence.text == NOTE_TEXT).one()
    )
    _draft(db, raw, people.ann1, ANN1_TREE)
    _draft(db, raw, people.ann2, ANN2_TREE)
    return corpus, sentences + [raw]


def test_search_annotator_sees_only_own_annotations(db, people, world) -> None:
    corpus, _ = world
    mine = svc.search(db, corpus, people.ann1, "(* (DT the) (NN bell))", scope="annotations")
    assert [h.annotator for h in mine.hits] == ["ann1"]
    assert mine.hits[0].link == f"/bench/{mine.hits[0].sentence_id}"
    # ann2's draft bracketed "the bell" as ADJP: ann1 never sees it
    assert svc.search(db, corpus, people.ann1, "(ADJP)", scope="annotations").total == 0
    theirs = svc.search(db, corpus, people.ann2, "(ADJP)", scope="annotations")
    assert [h.annotator for h in theirs.hits] == ["ann2"]


def test_search_adjudicator_sees_every_annotation(db, people, world) -> None:
    corpus, _ = world
    found = svc.search(db, corpus, people.adjudicator, "(VP rang _ _)", scope="annotations")
    assert sorted(h.annotator or "" for h in found.hits) == ["ann1", "ann2"]
    assert all(h.link == f"/review/{h.sentence_id}" for h in found.hits)


def test_search_gold_for_annotators_follows_the_corpus_setting(db, people, world) -> None:
    corpus, _ = world
    assert svc.search(db, corpus, people.ann1, "(ADJP)", scope="gold").total == 1
    corpus.settings = {**corpus.settings, "gold_visible_to_annotators": False}
    db.commit()
    with pytest.raises(Forbidden):
        svc.search(db, corpus, people.ann1, "(ADJP)", scope="gold")
    # adjudicators keep seeing the gold; annotators keep their own work and the words
    assert svc.search(db, corpus, people.adjudicator, "(ADJP)", scope="gold").total == 1
    assert svc.search(db, corpus, people.ann1, "(NP)", scope="annotations").total == 1
    assert svc.search(db, corpus, people.ann1, "the bell", scope="sentences").total == 4


def test_search_word_string_state_filter_and_pages(db, people, world) -> None:
    corpus, sentences = world
    everything = svc.search(db, corpus, people.adjudicator, "the *", scope="sentences", per_page=3)
    assert everything.total == len(sentences) and everything.pages == 3
    second = svc.search(
        db, corpus, people.adjudicator, "the *", scope="sentences", per_page=3, page=2
    )
    assert [h.sentence_id for h in second.hits] == [s.id for s in sentences[3:6]]
    queued = svc.search(db, corpus, people.adjudicator, "the *", scope="sentences", state="queued")
    assert [h.sentence_id for h in queued.hits] == [sentences[-1].id]
    hit = queued.hits[0]
    assert hit.spans == [(0, 2), (3, 5)] and hit.tree is None


def test_search_index_follows_new_gold(db, people, world) -> None:
    corpus, _ = world
    assert svc.search(db, corpus, people.adjudicator, "(NP (DT a) _)").total == 0
    import_gold(db, corpus.name, ["(ROOT (S (NP (DT a) (NN gull)) (VP (VBD cried)) (. .)))"])
    assert svc.search(db, corpus, people.adjudicator, "(NP (DT a) _)").total == 1


def test_search_export_gives_matching_trees_one_per_line(db, people, world) -> None:
    corpus, _ = world
    text = svc.export_text(db, corpus, people.adjudicator, "(NP (DT the) (JJ old) _)")
    assert text.splitlines() == GOLD[:2]


@pytest.mark.parametrize(
    ("pattern", "scope", "words"),
    [
        ("(NP (DT", "gold", "column"),
        ("(NP)", "sentences", "searches trees"),
        ("the", "everywhere", "unknown scope"),
    ],
)
def test_search_bad_request_says_what(db, people, world, pattern, scope, words) -> None:
    corpus, _ = world
    with pytest.raises(BadInput) as err:
        svc.search(db, corpus, people.ann1, pattern, scope=scope)
    assert words in str(err.value.detail)


def test_search_api_answers_and_refuses(login, db, people, world) -> None:
    corpus, _ = world
    ann1 = login("ann1")
    ok = ann1.client.get(
        f"/api/corpora/{corpus.id}/search", params={"pattern": "(ADJP)", "scope": "annotations"}
    )
    assert ok.status_code == 200 and ok.json()["total"] == 0
    bad = ann1.client.get(f"/api/corpora/{corpus.id}/search", params={"pattern": "(NP"})
    assert bad.status_code == 422 and bad.json()["column"] == 4
    corpus.settings = {**corpus.settings, "gold_visible_to_annotators": False}
    db.commit()
    assert (
        ann1.client.get(f"/api/corpora/{corpus.id}/search", params={"pattern": "(NP)"}).status_code
        == 403
    )
    adj = login("adj")
    api = adj.client.get(f"/api/corpora/{corpus.id}/search/export", params={"pattern": "(ADJP)"})
    assert api.status_code == 200
    assert (api.json()["count"], api.json()["text"]) == (1, GOLD[2] + "\n")
    page = adj.client.get("/search/export", params={"corpus": corpus.id, "pattern": "(ADJP)"})
    assert page.status_code == 200 and page.text == GOLD[2] + "\n"
    assert "attachment" in page.headers["content-disposition"]


def test_search_page_marks_the_match_and_hides_others_work(login, world) -> None:
    corpus, _ = world
    ann1 = login("ann1")
    page = ann1.client.get(
        "/search",
        params={"corpus": corpus.id, "pattern": "(NP (DT the) _)", "scope": "annotations"},
    )
    assert page.status_code == 200
    assert "<mark>the mate</mark>" in page.text and "ann1's annotation" in page.text
    assert "ADJP" not in page.text  # ann2's tree is nowhere on the page
    bad = ann1.client.get("/search", params={"corpus": corpus.id, "pattern": "(NP"})
    assert bad.status_code == 422 and "never closed" in bad.text
