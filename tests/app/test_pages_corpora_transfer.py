"""The Transfer page: upload imports with clear errors, exports as file downloads."""

from __future__ import annotations

import io
import zipfile

from sqlalchemy import select

from app.models import Corpus
from tests.app.row_counts import count_rows

TREES = "".join(f"(ROOT (S (NP-SBJ (NNP Boat{i})) (VP (VBD sank)) (. .)))\n" for i in range(20))


def _upload(client, csrf, data: bytes, name: str = "file.ptb", **fields):
    form = {
        "csrf_token": csrf,
        "corpus_name": "",
        "new_corpus": "Harbour",
        "kind": "gold",
        **fields,
    }
    return client.post("/transfer/import", data=form, files={"upload": (name, data)})


def test_pages_transfer_import_and_export(login, db) -> None:
    admin = login("admin")
    resp = _upload(admin.client, admin.csrf, TREES.encode())
    assert resp.status_code == 200
    assert "20 sentences imported into &#39;Harbour&#39;" in resp.text
    cid = db.scalar(select(Corpus.id))
    plain = admin.client.get(f"/transfer/export?corpus={cid}&strip=true")
    assert plain.status_code == 200
    assert plain.headers["content-disposition"] == 'attachment; filename="harbour.ptb"'
    assert plain.text.splitlines()[0] == "(ROOT (S (NP (NNP Boat0)) (VP (VBD sank)) (. .)))"
    split = admin.client.get(f"/transfer/export?corpus={cid}&split=50/25/25&by=sentence&seed=9")
    assert split.headers["content-type"] == "application/zip"
    archive = zipfile.ZipFile(io.BytesIO(split.content))
    sizes = {n: len(archive.read(n).decode().splitlines()) for n in archive.namelist()}
    assert sizes == {"harbour-train.ptb": 10, "harbour-dev.ptb": 5, "harbour-test.ptb": 5}
    again = admin.client.get(f"/transfer/export?corpus={cid}&split=50/25/25&by=sentence&seed=9")
    assert again.content == split.content


def test_pages_transfer_bad_file_shows_where_and_stores_nothing(login, db) -> None:
    admin = login("admin")
    lines = [f"(ROOT (S (NP-SBJ (NNP Raft{i})) (VP (VBD drifted)) (. .)))" for i in range(45)]
    good = "(ROOT (S (NP-SBJ (NNP Raft)) (VP (VBD drifted)) (. .)))"
    lines[39] = good + ")"  # one bracket too many, right after the 55 characters of `good`
    before = count_rows(db)
    resp = _upload(admin.client, admin.csrf, ("\n".join(lines) + "\n").encode(), "raft.ptb")
    assert resp.status_code == 422
    assert "Nothing was imported." in resp.text
    assert "raft.ptb, line 40, column 56" in resp.text
    assert count_rows(db) == before


def test_pages_transfer_empty_and_non_utf8(login, db) -> None:
    admin = login("admin")
    empty = _upload(admin.client, admin.csrf, b"", "empty.txt", kind="text")
    assert empty.status_code == 422 and "empty.txt: the file is empty" in empty.text
    latin = _upload(admin.client, admin.csrf, b"ok .\nna\xefve .\n", "l.txt", kind="text")
    assert latin.status_code == 422 and "l.txt, line 2" in latin.text
    assert "byte 0xEF" in latin.text
    assert count_rows(db)["corpora"] == 0


def test_pages_transfer_permissions(login, db) -> None:
    ann = login("ann1")
    page = ann.client.get("/transfer")
    assert page.status_code == 200 and "Imports are done by an admin" in page.text
    assert _upload(ann.client, ann.csrf, TREES.encode()).status_code == 403
    assert ann.client.get("/transfer/export?corpus=1").status_code == 403
    adj = login("adj")
    assert "Download" in adj.client.get("/transfer").text


def test_pages_transfer_oversize_upload_is_413(app, login, settings) -> None:
    admin = login("admin")
    big = b"word " * (settings.max_upload_bytes // 5 + 10)
    resp = _upload(admin.client, admin.csrf, big, "big.txt", kind="text")
    assert resp.status_code == 413


def test_pages_transfer_import_redirects_so_a_reload_imports_nothing(login, db) -> None:
    admin = login("admin")
    form = {"csrf_token": admin.csrf, "corpus_name": "", "new_corpus": "Harbour", "kind": "gold"}
    resp = admin.client.post(
        "/transfer/import",
        data=form,
        files={"upload": ("boats.ptb", TREES.encode())},
        follow_redirects=False,
    )
    assert resp.status_code == 303
    target = resp.headers["location"]
    assert target.startswith("/transfer?") and "imported=" in target
    after = count_rows(db)
    for _ in range(2):  # the result page, then a reload of it
        page = admin.client.get(target)
        assert page.status_code == 200
        assert "20 sentences imported into &#39;Harbour&#39;" in page.text
    assert count_rows(db) == after
    # the report is an admin's: others get the page without it
    assert "sentences imported" not in login("adj").client.get(target).text
