"""`treewright demo` tells what it does while the first grammar trains, serves meanwhile, and
says which login adjudicates; the Bench says suggestions arrive once the grammar is ready.
The demo data is the invented Saltmarrow Ferry Cooperative."""

from __future__ import annotations

import json
import re

from sqlalchemy import select

from app.models import GV_TRAINING, Corpus, GrammarVersion
from tests.app.bench_helpers import assign, make_corpus
from tests.app.test_cli_commands import cli  # noqa: F401  (the fixture)


def test_demo_logins_say_who_adjudicates(cli) -> None:  # noqa: F811
    out = cli("demo", "--no-serve", "--no-train").output
    lines = {line.split()[0]: line for line in out.splitlines() if line.startswith("  ")}
    assert "the adjudicator of this demo" in lines["purser"]
    assert "annotates on the Bench" in lines["netmender"]
    assert "adjudicates only sentences it did not annotate" in lines["tidewatch"]
    assert "Training the first grammar" not in out


def test_demo_tells_the_training_progress_and_trains_the_first_grammar(db, cli) -> None:  # noqa: F811
    # One demo load with training serves both checks: what the command says, and what the
    # loader left in the database (training the first grammar is the slow part).
    out = cli("demo", "--no-serve").output
    db.expire_all()
    version = db.scalar(select(GrammarVersion))
    assert version is not None and version.status == "ready" and version.number == 1
    assert version.training_size > 0
    assert db.scalar(select(Corpus.active_grammar_id)) == version.id
    assert re.search(r"Training the first grammar on the 75 gold trees: about \d", out)
    steps = [line for line in out.splitlines() if line.startswith("first grammar: ")]
    assert steps, out  # at least the first state is told before the end
    assert re.search(r"grammar version 1: ready, held-out F1 0\.\d{3}; the Bench offers", out)
    # logins come before the wait
    assert out.index("Demo logins") < out.index("Training the first grammar")


def test_bench_says_suggestions_arrive_when_the_grammar_is_ready(db, people, login) -> None:
    corpus, sentences = make_corpus(db)
    assign(db, sentences, people.ann1)
    db.add(GrammarVersion(corpus_id=corpus.id, number=1, status=GV_TRAINING, progress=0.4))
    db.commit()
    page = login("ann1").client.get(f"/bench/{sentences[0].id}").text
    data = json.loads(re.search(r'id="bench-data">(.*?)</script>', page, re.S).group(1))
    assert data["source"] == "flat" and data["suggestion"] is None
    assert "suggestions arrive when the grammar is ready" in data["start_note"]


def test_bench_without_any_grammar_job_says_no_grammar(db, people, login) -> None:
    corpus, sentences = make_corpus(db)
    assign(db, sentences, people.ann1)
    page = login("ann1").client.get(f"/bench/{sentences[0].id}").text
    data = json.loads(re.search(r'id="bench-data">(.*?)</script>', page, re.S).group(1))
    assert "suggestions arrive" not in (data["start_note"] or "")
