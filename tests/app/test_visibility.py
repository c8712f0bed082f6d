"""Who may read a corpus (app.services.visibility): members only by default.

A member is an annotator with a sentence of the corpus assigned to them; adjudicators and
admins read every corpus; the corpus setting ``visible_to_everyone`` opens it to all. To
anyone else every page and API route of the corpus answers 404, like a corpus that does not
exist, and the lists leave it out.
"""

from __future__ import annotations

import pytest

from app.models import Corpus
from tests.app.bench_helpers import assign, make_corpus

MISSING = 987_654


def _routes(cid: int) -> list[str]:
    return [
        f"/api/corpora/{cid}",
        f"/api/corpora/{cid}/sentences",
        f"/corpora/{cid}",
        f"/agreement?corpus={cid}",
        f"/agreement/log.csv?corpus={cid}",
        f"/api/corpora/{cid}/search?pattern=tide&scope=sentences",
        f"/search?corpus={cid}&pattern=tide&scope=sentences",
        f"/api/grammars?corpus_id={cid}",
        f"/grammars?corpus={cid}",
    ]


@pytest.fixture
def two(db, people):  # type: ignore[no-untyped-def]
    """Corpus "Tides" with a sentence assigned to ann1; corpus "Locks" assigned to nobody."""
    tides, (sentence,) = make_corpus(db, ["the tide turned ."], name="Tides")
    locks, _ = make_corpus(db, ["the lock filled ."], name="Locks")
    assign(db, [sentence], people.ann1)
    return tides, locks


def _names(client) -> set[str]:  # type: ignore[no-untyped-def]
    return {row["name"] for row in client.get("/api/corpora").json()}


def test_visibility_annotator_reads_only_corpora_they_are_assigned_in(login, two) -> None:
    tides, locks = two
    ann1, ann2 = login("ann1"), login("ann2")
    assert _names(ann1.client) == {"Tides"}
    assert _names(ann2.client) == set()
    for url in _routes(tides.id):
        assert ann1.client.get(url).status_code == 200, url
    for who, cid in ((ann1, locks.id), (ann2, tides.id), (ann2, locks.id)):
        for url in _routes(cid):
            resp = who.client.get(url, headers={"Accept": "application/json"})
            assert resp.status_code == 404, url
            absent = who.client.get(
                url.replace(str(cid), str(MISSING)), headers={"Accept": "application/json"}
            )
            # the same answer as for a corpus that does not exist: nothing leaks
            assert resp.json()["detail"].replace(str(cid), "N") == absent.json()["detail"].replace(
                str(MISSING), "N"
            ), url
    home = ann2.client.get("/").text
    assert "Tides" not in home and "Locks" not in home


def test_visibility_adjudicators_and_admins_read_every_corpus(login, two) -> None:
    for name in ("adj", "admin"):
        me = login(name)
        assert _names(me.client) == {"Tides", "Locks"}
        for corpus in two:
            for url in _routes(corpus.id):
                assert me.client.get(url).status_code == 200, (name, url)


def test_visibility_setting_opens_a_corpus_to_everyone(login, db, two) -> None:
    _, locks = two
    ann2 = login("ann2")
    assert ann2.client.get(f"/api/corpora/{locks.id}").status_code == 404
    admin = login("admin")
    resp = admin.client.patch(
        f"/api/corpora/{locks.id}",
        headers=admin.headers(),
        json={"settings": {"visible_to_everyone": True}},
    )
    assert resp.status_code == 200, resp.text
    db.expire_all()
    assert db.get(Corpus, locks.id).options.visible_to_everyone is True
    assert _names(ann2.client) == {"Locks"}
    for url in _routes(locks.id):
        assert ann2.client.get(url).status_code == 200, url
