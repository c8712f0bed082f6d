"""The corpora JSON API: list, detail, sentences, import upload, export, assign, remove."""

from __future__ import annotations

from sqlalchemy import select

from app.models import Corpus
from tests.app.row_counts import count_rows

TREES = "".join(f"(ROOT (S (NP-SBJ (NNP Buoy{i})) (VP (VBD bobbed)) (. .)))\n" for i in range(10))


def _import(me, data: bytes, name: str = "t.ptb", **form):
    return me.client.post(
        "/api/corpora/import",
        headers=me.headers(),
        data={"corpus_name": "Moorings", "kind": "gold", **form},
        files={"upload": (name, data)},
    )


def test_imports_api_upload_and_read_back(login, db, people) -> None:
    admin = login("admin")
    resp = _import(admin, TREES.encode())
    assert resp.status_code == 201, resp.text
    body = resp.json()
    assert body["imported"] == 10 and body["document_name"] == "t"
    raw = _import(admin, b"Buoy0 bobbed .\nA new line .\n", "r.txt", kind="text")
    assert raw.json()["duplicates"][0]["same_as_document"] == "t"
    cid = body["corpus_id"]
    ann = login("adj")  # adjudicators read every corpus (annotators: test_visibility.py)
    listing = ann.client.get("/api/corpora").json()
    assert listing[0]["states"]["gold"] == 10 and listing[0]["states"]["queued"] == 2
    detail = ann.client.get(f"/api/corpora/{cid}").json()
    assert [d["name"] for d in detail["document_list"]] == ["t", "r"]
    assert "NP-SBJ" in detail["label_set"]
    page = ann.client.get(f"/api/corpora/{cid}/sentences?per_page=4&page=3").json()
    assert page["total"] == 12 and page["pages"] == 3 and len(page["sentences"]) == 4


def test_imports_api_bad_file_is_422_with_location(login, db, people) -> None:
    admin = login("admin")
    lines = TREES.splitlines()
    lines[6] = "(ROOT (S (NP-SBJ (NNP Buoy6)) (VP (VBD bobbed) away) (. .)))"
    before = count_rows(db)
    resp = _import(admin, ("\n".join(lines) + "\n").encode(), "bad.ptb")
    assert resp.status_code == 422
    body = resp.json()
    assert body["line"] == 7 and body["source"] == "bad.ptb"
    assert body["detail"].startswith("bad.ptb, line 7, column")
    db.rollback()
    assert count_rows(db) == before
    assert _import(login("ann1"), TREES.encode()).status_code == 403


def test_imports_api_export_assign_remove(login, db, people) -> None:
    admin = login("admin")
    _import(admin, TREES.encode())
    _import(admin, b"Line one .\nLine two .\n", "raw.txt", kind="text")
    cid = db.scalar(select(Corpus.id))
    adj = login("adj")
    exp = adj.client.get(f"/api/corpora/{cid}/export?train=6&dev=2&test=2&by=sentence&seed=1")
    assert exp.status_code == 200
    assert exp.json()["counts"] == {
        "moorings-train.ptb": 6,
        "moorings-dev.ptb": 2,
        "moorings-test.ptb": 2,
    }
    assert login("ann1").client.get(f"/api/corpora/{cid}/export").status_code == 403
    assigned = admin.client.post(f"/api/corpora/{cid}/assign", headers=admin.headers(), json={})
    assert assigned.json()["created"] == 4
    wrong = admin.client.post(
        f"/api/corpora/{cid}/remove", headers=admin.headers(), json={"confirm_name": "moorings"}
    )
    assert wrong.status_code == 422
    ok = admin.client.post(
        f"/api/corpora/{cid}/remove", headers=admin.headers(), json={"confirm_name": "Moorings"}
    )
    assert ok.json() == {"removed": "Moorings"}
    assert admin.client.get(f"/api/corpora/{cid}").status_code == 404


def test_imports_api_settings_patch(login, db, people) -> None:
    admin = login("admin")
    made = admin.client.post(
        "/api/corpora",
        headers=admin.headers(),
        json={"name": "Slipway", "settings": {"retrain_every": 5}},
    )
    assert made.status_code == 201 and made.json()["settings"]["retrain_every"] == 5
    cid = made.json()["id"]
    patched = admin.client.patch(
        f"/api/corpora/{cid}",
        headers=admin.headers(),
        json={"settings": {"annotators_per_sentence": 3}},
    )
    assert patched.json()["settings"]["annotators_per_sentence"] == 3
    bad = admin.client.patch(
        f"/api/corpora/{cid}",
        headers=admin.headers(),
        json={"settings": {"annotators_per_sentence": 99}},
    )
    assert bad.status_code == 422
