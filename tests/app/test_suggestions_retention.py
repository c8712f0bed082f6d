"""After a retraining, older suggestions of unstarted sentences and older saved grammars go;
what a started sentence came from, the active grammar and every version's record stay."""

from __future__ import annotations

from sqlalchemy import select

from app.models import GV_READY, Annotation, GrammarVersion, Suggestion
from app.services.suggestions import prune
from tests.app.bench_helpers import make_corpus


def _versions(db, corpus, n: int) -> list[GrammarVersion]:
    out = []
    for number in range(1, n + 1):
        v = GrammarVersion(
            corpus_id=corpus.id,
            number=number,
            status=GV_READY,
            data=f"grammar {number}".encode(),
            heldout_f1=0.5 + number / 100,
            training_size=10 * number,
        )
        db.add(v)
        db.flush()
        out.append(v)
    corpus.active_grammar_id = out[-1].id
    db.commit()
    return out


def test_prune_keeps_active_and_started_suggestions_and_drops_old_grammars(db, people) -> None:
    corpus, sentences = make_corpus(db, ["the crew ate", "gulls circled", "rope frays"])
    versions = _versions(db, corpus, 4)
    for v in versions:
        for s in sentences:
            db.add(
                Suggestion(
                    sentence_id=s.id, grammar_version_id=v.id, trees=["(X x)"], logprobs=[None]
                )
            )
    started = sentences[0]
    db.add(Annotation(sentence_id=started.id, user_id=people.ann1.id, state="draft", head=1))
    db.add(
        Annotation(sentence_id=sentences[1].id, user_id=people.ann2.id, state="draft", head=0)
    )  # a note only: not started
    db.commit()
    deleted, dropped = prune(db, corpus, keep_grammars=2)
    db.commit()
    db.expire_all()  # read back what the database holds
    left = set(db.execute(select(Suggestion.sentence_id, Suggestion.grammar_version_id)))
    active = versions[-1].id
    assert left == {(s.id, active) for s in sentences} | {(started.id, v.id) for v in versions}
    assert deleted == 2 * 3  # two unstarted sentences x three older versions
    saved = {
        v.number: v.data is not None
        for v in db.scalars(select(GrammarVersion).order_by(GrammarVersion.number))
    }
    assert saved == {1: False, 2: True, 3: True, 4: True} and dropped == 1
    records = db.scalars(select(GrammarVersion).order_by(GrammarVersion.number)).all()
    assert [(v.number, v.heldout_f1, v.training_size) for v in records] == [
        (n, 0.5 + n / 100, 10 * n) for n in range(1, 5)
    ]


def test_prune_with_zero_keeps_every_saved_grammar(db) -> None:
    corpus, _ = make_corpus(db, ["the crew ate"])
    _versions(db, corpus, 3)
    assert prune(db, corpus, keep_grammars=0) == (0, 0)
    assert all(v.data for v in db.scalars(select(GrammarVersion)))
