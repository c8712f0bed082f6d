"""Imports of every kind are checked, staged in short transactions and published at once:
nobody sees a half-done import, a failure leaves nothing, and saves meanwhile answer 201 or a
retryable 503, never 500."""

from __future__ import annotations

import threading

import httpx
import pytest
from sqlalchemy import select

from app.models import Corpus, Gold, Sentence
from app.services import staged_import
from app.services.corpora import corpus_list
from tests.app.bench_helpers import assign, flat_text, make_corpus
from tests.app.conftest import PASSWORD
from tests.app.live_server import Client, LiveServer
from tests.app.row_counts import count_rows


def _text(count: int) -> bytes:
    return "".join(f"crate {i} waits on the quay .\n" for i in range(count)).encode()


def _lines(data: bytes):  # type: ignore[no-untyped-def]
    return lambda: iter(data.decode().splitlines(keepends=True))


def test_staged_import_is_invisible_until_published(app, db, people, monkeypatch) -> None:
    monkeypatch.setattr(staged_import, "STAGE_CHUNK", 10)
    seen: list[tuple[int, list[str]]] = []
    factory = app.state.sessionmaker

    def look(done: int, total: int) -> None:  # runs between staging chunks
        with factory() as other:
            visible = [c.name for c in corpus_list(other)]
            in_target = (
                other.scalar(select(Sentence.id).join(Corpus).where(Corpus.name == "Quay"))
                is not None
            )
            seen.append((done, visible + (["rows in target"] if in_target else [])))

    result = staged_import.import_stream(
        db,
        _lines(_text(45)),
        source="quay.txt",
        corpus_name="Quay",
        document_name="quay",
        progress=look,
    )
    assert result.imported == 45
    assert [done for done, _ in seen[:4]] == [10, 20, 30, 40]
    assert all(names == [] for _, names in seen[:-1])  # nothing, not even the staging corpus
    assert [c.name for c in corpus_list(db)] == ["Quay"]
    positions = db.scalars(select(Sentence.position).order_by(Sentence.position)).all()
    assert positions == list(range(45))
    assert db.query(Corpus).count() == 1  # the staging corpus is gone


def test_staged_import_failure_at_publish_leaves_nothing(db, people, monkeypatch) -> None:
    monkeypatch.setattr(staged_import, "STAGE_CHUNK", 10)
    before = count_rows(db)

    def broken(*args, **kwargs):  # type: ignore[no-untyped-def]
        raise RuntimeError("the disk filled up")

    monkeypatch.setattr(staged_import, "_publish", broken)
    with pytest.raises(RuntimeError):
        staged_import.import_stream(
            db, _lines(_text(35)), source="q.txt", corpus_name="Quay", document_name="q"
        )
    assert count_rows(db) == before
    assert db.query(Corpus).count() == 0


def test_staged_import_gold_keeps_trees_and_appends_to_a_document(db, people) -> None:
    gold = (
        b"(ROOT (S (NP (NN tide)) (VP (VBD turned))))\n"
        b"(ROOT (S (NP (NN lock)) (VP (VBD filled))))\n"
    )
    staged_import.import_stream(
        db, _lines(gold), source="g.ptb", corpus_name="Quay", document_name="log", kind="gold"
    )
    staged_import.import_stream(
        db, _lines(_text(2)), source="t.txt", corpus_name="Quay", document_name="log"
    )
    rows = db.execute(
        select(Sentence.position, Sentence.state, Sentence.text).order_by(Sentence.position)
    ).all()
    assert [(p, s) for p, s, _ in rows] == [(0, "gold"), (1, "gold"), (2, "queued"), (3, "queued")]
    assert db.query(Gold).count() == 2
    corpus = db.scalar(select(Corpus))
    assert {"NP", "VP", "S"} <= set(corpus.label_set)


def test_staged_import_abandoned_staging_is_dropped(db, people) -> None:
    from datetime import timedelta

    staging = Corpus(
        name="import in progress x",
        label_set=[],
        tag_set=[],
        settings={"staging_import": "lost.txt"},
    )
    db.add(staging)
    db.commit()
    assert corpus_list(db) == []
    assert staged_import.drop_abandoned_staging(db) == 0  # young: maybe another process's
    assert staged_import.drop_abandoned_staging(db, older_than=timedelta(0)) == 1
    assert db.query(Corpus).count() == 0


def _trees(count: int) -> bytes:
    return "".join(
        f"(ROOT (S (NP (NN crate) (CD {i})) (VP (VBZ waits) (PP (IN on) (NP (DT the) "
        "(NN quay)))) (. .)))\n"
        for i in range(count)
    ).encode()


@pytest.mark.slow
@pytest.mark.parametrize(
    "kind, make, fields",
    [
        ("text", _text, {}),
        ("annotation", _trees, {"annotator": "ann2"}),  # trees as ann2's annotations
    ],
)
def test_staged_import_saves_go_on_meanwhile(settings, db, people, kind, make, fields) -> None:
    corpus, (sentence,) = make_corpus(db, ["the tide turned ."], labels=[], tags=[])
    assign(db, [sentence], people.ann1)
    tree = flat_text(sentence.tokens)
    with LiveServer(settings) as server:
        admin, ann = Client(server.url, "admin", PASSWORD), Client(server.url, "ann1", PASSWORD)
        answers: list[int] = []
        done = threading.Event()

        def big_import() -> None:
            try:
                resp = admin.http.post(
                    "/api/corpora/import",
                    headers={"X-CSRF-Token": admin.csrf},
                    data={"corpus_name": "Quay", "kind": kind, **fields},
                    files={"upload": ("big.txt", make(20_000))},
                    timeout=600,
                )
                answers.append(resp.status_code)
            finally:
                done.set()

        worker = threading.Thread(target=big_import)
        worker.start()
        statuses: list[int] = []
        head = 0
        while not done.is_set():
            try:
                resp = ann.save(sentence.id, head, tree)
            except httpx.HTTPError:
                statuses.append(599)
                continue
            statuses.append(resp.status_code)
            if resp.status_code == 201:
                head = resp.json()["revision"]["number"]
        worker.join()
    assert answers == [201]
    assert statuses and set(statuses) <= {201, 503}, statuses
    assert statuses.count(201) >= 1
    imported = db.scalar(select(Corpus).where(Corpus.name == "Quay"))
    assert imported is not None
    assert db.query(Sentence).filter(Sentence.corpus_id == imported.id).count() == 20_000
