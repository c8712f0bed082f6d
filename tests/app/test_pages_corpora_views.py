"""Corpora pages: the list with counts, the corpus page with pagination and admin actions."""

from __future__ import annotations

import re

from sqlalchemy import func, select

from app.models import Assignment, Corpus, Sentence
from app.services.imports import import_bytes

TREE = "(ROOT (S (NP-SBJ (NNS Gulls)) (VP (VBD circled)) (. .)))\n"


def _seed(db, raw: int = 3) -> int:
    import_bytes(db, TREE.encode(), source="gold.ptb", corpus_name="Quayside", kind="gold")
    text = "".join(f"Crate {i} waits on the quay .\n" for i in range(raw))
    import_bytes(db, text.encode(), source="raw.txt", corpus_name="Quayside")
    return _open_to_everyone(db)


def _open_to_everyone(db) -> int:
    # these tests are about the pages; who may read a corpus is test_visibility.py's
    corpus = db.scalar(select(Corpus))
    corpus.settings = {**corpus.settings, "visible_to_everyone": True}
    db.commit()
    return corpus.id


def test_pages_corpora_list_shows_counts(login, db) -> None:
    _seed(db, raw=3)
    me = login("ann1")
    page = me.client.get("/")
    assert page.status_code == 200
    html = page.text
    assert "Quayside" in html and "queued 3" in html and "gold 1" in html
    assert "New corpus" not in html  # annotators do not create corpora


def test_pages_corpora_list_needs_login(app) -> None:
    from fastapi.testclient import TestClient

    resp = TestClient(app).get("/", follow_redirects=False)
    assert resp.status_code == 303 and resp.headers["location"].startswith("/login")


def test_pages_corpora_admin_creates_corpus(login, db) -> None:
    admin = login("admin")
    resp = admin.client.post(
        "/corpora",
        data={"name": "Net loft", "csrf_token": admin.csrf, "label_set": "S NP VP", "tag_set": ""},
        follow_redirects=False,
    )
    assert resp.status_code == 303
    corpus = db.scalar(select(Corpus).where(Corpus.name == "Net loft"))
    assert corpus.label_set == ["S", "NP", "VP"]
    again = admin.client.post("/corpora", data={"name": "Net loft", "csrf_token": admin.csrf})
    assert again.status_code == 409 and "exists already" in again.text
    ann = login("ann1")
    assert (
        ann.client.post("/corpora", data={"name": "X", "csrf_token": ann.csrf}).status_code == 403
    )


def _link(html: str, rel: str) -> str:
    found = re.search(rf'href="([^"]+)" rel="{rel}"', html)
    assert found is not None, f"no {rel} link"
    return found.group(1).replace("&amp;", "&")


def test_pages_corpora_corpus_page_paginates(login, db) -> None:
    cid = _seed(db, raw=120)
    me = login("ann1")
    first = me.client.get(f"/corpora/{cid}")
    assert first.status_code == 200 and "50 a page, 3 pages" in first.text
    assert 'rel="prev"' not in first.text
    last = me.client.get(_link(first.text, "last"))
    assert "Crate 119 waits" in last.text and "Crate 0 waits" not in last.text
    assert 'rel="next"' not in last.text
    middle = me.client.get(_link(last.text, "prev"))
    assert "Crate 60 waits" in middle.text and "Crate 119 waits" not in middle.text
    assert me.client.get(_link(middle.text, "next")).text.count("waits") == last.text.count("waits")
    assert me.client.get(f"/corpora/{cid}?after=nonsense").status_code == 422
    gold_only = me.client.get(f"/corpora/{cid}?state=gold")
    assert "Gulls circled" in gold_only.text and "Crate 1 waits" not in gold_only.text
    assert me.client.get("/corpora/999").status_code == 404


def test_pages_corpora_words_are_escaped(login, db) -> None:
    import_bytes(
        db, b"A <img src=x onerror=alert(1)> word .\n", source="x.txt", corpus_name="Hostile"
    )
    cid = _open_to_everyone(db)
    html = login("ann1").client.get(f"/corpora/{cid}").text
    assert "<img src=x" not in html and "&lt;img" in html


def test_pages_corpora_assign_from_page(login, db, people) -> None:
    cid = _seed(db, raw=4)
    admin = login("admin")
    resp = admin.client.post(
        f"/corpora/{cid}/assign", data={"csrf_token": admin.csrf}, follow_redirects=True
    )
    assert resp.status_code == 200 and "8 assignments made." in resp.text
    assert db.scalar(select(func.count()).select_from(Assignment)) == 8
    mine = login("ann1").client.get(f"/corpora/{cid}").text
    assert "/bench/" in mine  # an assigned annotator gets links to the Bench
    ann = login("ann2")
    assert (
        ann.client.post(f"/corpora/{cid}/assign", data={"csrf_token": ann.csrf}).status_code == 403
    )


def test_pages_corpora_settings_saved_and_checked(login, db) -> None:
    cid = _seed(db)
    admin = login("admin")
    form = {
        "csrf_token": admin.csrf,
        "annotators_per_sentence": "3",
        "retrain_every": "40",
        "max_f1_drop": "0.02",
        "heldout_every": "10",
        "unknown_label_policy": "refuse",
        "label_set": "NP NP-SBJ ROOT S VP",
        "tag_set": ". NNS VBD",
        "description": "d",
    }
    assert (
        admin.client.post(f"/corpora/{cid}/settings", data=form, follow_redirects=False).status_code
        == 303
    )
    db.expire_all()
    corpus = db.get(Corpus, cid)
    assert corpus.options.annotators_per_sentence == 3
    assert corpus.options.auto_gold_when_identical is False  # unchecked box
    assert corpus.options.unknown_label_policy == "refuse"
    bad = admin.client.post(
        f"/corpora/{cid}/settings", data={**form, "annotators_per_sentence": "0"}
    )
    assert bad.status_code == 422 and "outside" in bad.text
    db.expire_all()
    assert db.get(Corpus, cid).options.annotators_per_sentence == 3


def test_pages_corpora_remove_needs_typed_name(login, db) -> None:
    cid = _seed(db)
    admin = login("admin")
    wrong = admin.client.post(
        f"/corpora/{cid}/remove", data={"csrf_token": admin.csrf, "confirm_name": "quayside"}
    )
    assert wrong.status_code == 422 and "type its name exactly" in wrong.text
    assert db.scalar(select(func.count()).select_from(Sentence)) == 4
    ok = admin.client.post(
        f"/corpora/{cid}/remove",
        data={"csrf_token": admin.csrf, "confirm_name": "Quayside"},
        follow_redirects=False,
    )
    assert ok.status_code == 303
    assert db.scalar(select(func.count()).select_from(Sentence)) == 0
