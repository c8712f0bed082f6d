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


# --- the member list -------------------------------------------------------------------------


def test_visibility_explicit_member_reads_the_corpus_until_taken_off(login, two) -> None:
    _, locks = two
    ann2, admin = login("ann2"), login("admin")
    assert ann2.client.get(f"/api/corpora/{locks.id}").status_code == 404
    resp = admin.client.post(
        f"/api/corpora/{locks.id}/members", headers=admin.headers(), json={"username": "ann2"}
    )
    assert resp.status_code == 200, resp.text
    body = resp.json()
    assert body["changed"] is True
    assert [(m["username"], m["explicit"], m["assigned"]) for m in body["members"]] == [
        ("ann2", True, 0)
    ]
    assert _names(ann2.client) == {"Locks"}
    for url in _routes(locks.id):
        assert ann2.client.get(url).status_code == 200, url
    again = admin.client.post(
        f"/api/corpora/{locks.id}/members", headers=admin.headers(), json={"username": "ann2"}
    )
    assert again.status_code == 200 and again.json()["changed"] is False
    gone = admin.client.post(
        f"/api/corpora/{locks.id}/members/remove",
        headers=admin.headers(),
        json={"username": "ann2"},
    )
    assert gone.status_code == 200, gone.text
    assert gone.json()["members"] == [] and gone.json()["still_assigned"] == 0
    for url in _routes(locks.id):
        assert ann2.client.get(url).status_code == 404, url


def test_visibility_member_by_assignment_stays_after_removal_from_the_list(login, two) -> None:
    tides, _ = two  # ann1 has a sentence of Tides assigned
    admin, ann1 = login("admin"), login("ann1")
    added = admin.client.post(
        f"/api/corpora/{tides.id}/members", headers=admin.headers(), json={"username": "ann1"}
    )
    assert [(m["username"], m["explicit"], m["assigned"]) for m in added.json()["members"]] == [
        ("ann1", True, 1)
    ]
    gone = admin.client.post(
        f"/api/corpora/{tides.id}/members/remove",
        headers=admin.headers(),
        json={"username": "ann1"},
    )
    assert gone.json()["still_assigned"] == 1
    assert [(m["username"], m["explicit"]) for m in gone.json()["members"]] == [("ann1", False)]
    assert ann1.client.get(f"/api/corpora/{tides.id}").status_code == 200


def test_visibility_only_admins_change_the_list(login, two) -> None:
    tides, locks = two
    for name in ("ann1", "adj"):
        me = login(name)
        for path, form in (("members", {"username": "ann2"}), ("members/remove", {})):
            api = me.client.post(
                f"/api/corpora/{tides.id}/{path}", headers=me.headers(), json={"username": "ann2"}
            )
            page = me.client.post(
                f"/corpora/{tides.id}/{path}",
                data={"csrf_token": me.csrf, **form},
                follow_redirects=False,
            )
            assert (api.status_code, page.status_code) == (403, 403), (name, path)
    # adjudicators read the list; annotators do not (it says who works where)
    assert login("adj").client.get(f"/api/corpora/{locks.id}/members").status_code == 200
    assert login("ann1").client.get(f"/api/corpora/{tides.id}/members").status_code == 403


def test_visibility_member_list_refuses_unknown_and_disabled_accounts(login, db, people, two):  # type: ignore[no-untyped-def]
    _, locks = two
    admin = login("admin")
    unknown = admin.client.post(
        f"/api/corpora/{locks.id}/members", headers=admin.headers(), json={"username": "nobody"}
    )
    assert unknown.status_code == 404 and "no user named 'nobody'" in unknown.text
    people.ann2.active = False
    db.commit()
    disabled = admin.client.post(
        f"/api/corpora/{locks.id}/members", headers=admin.headers(), json={"username": "ann2"}
    )
    assert disabled.status_code == 422 and "disabled" in disabled.text
    not_on = admin.client.post(
        f"/api/corpora/{locks.id}/members/remove",
        headers=admin.headers(),
        json={"username": "ann1"},
    )
    assert not_on.status_code == 404 and "not on the member list" in not_on.text


def test_visibility_corpus_page_adds_and_removes_members(login, two) -> None:
    _, locks = two
    admin, ann2 = login("admin"), login("ann2")
    resp = admin.client.post(
        f"/corpora/{locks.id}/members",
        data={"csrf_token": admin.csrf, "username": "ann2"},
        follow_redirects=False,
    )
    assert resp.status_code == 303
    page = admin.client.get(resp.headers["location"]).text
    assert 'id="members"' in page and "Ann2" in page and "Take off the list" in page
    assert ann2.client.get(f"/corpora/{locks.id}").status_code == 200
    resp = admin.client.post(
        f"/corpora/{locks.id}/members/remove",
        data={"csrf_token": admin.csrf, "username": "ann2"},
        follow_redirects=False,
    )
    assert resp.status_code == 303
    assert ann2.client.get(f"/corpora/{locks.id}").status_code == 404


def test_visibility_settings_form_keeps_the_open_corpus_setting(login, db, two) -> None:
    _, locks = two
    admin = login("admin")
    form = {"csrf_token": admin.csrf, "label_set": " ".join(locks.label_set)}
    form["tag_set"] = " ".join(locks.tag_set)
    for ticked in (True, False):
        data = {**form, **({"visible_to_everyone": "on"} if ticked else {})}
        resp = admin.client.post(f"/corpora/{locks.id}/settings", data=data, follow_redirects=False)
        assert resp.status_code == 303, resp.text
        db.expire_all()
        assert db.get(Corpus, locks.id).options.visible_to_everyone is ticked
        page = admin.client.get(f"/corpora/{locks.id}").text
        assert ('name="visible_to_everyone" checked' in page) is ticked
