"""A split that leaves a part empty says so, and says how to get one with no empty part: in
the service, on the Transfer page (nothing downloads until asked) and on the command line.
The gold trees are invented (a ferry's log, documents of different sizes)."""

from __future__ import annotations

import io
import zipfile

from sqlalchemy import func, select

from app.models import Corpus, Event
from app.services.exports import SplitSpec, export_gold
from tests.app.test_cli_commands import cli  # noqa: F401  (the fixture)
from tests.app.test_exports_split import _load

# three documents kept whole cannot fill 80/10/10 of 76 trees whatever the seed (the greedy
# fill gives train the first two documents in every order)
UNEVEN = {"engine-log": 40, "minutes": 20, "notices": 16}


def _empty_parts(db, cid: int, spec: SplitSpec) -> list[str]:  # type: ignore[no-untyped-def]
    return export_gold(db, cid, split=spec).empty_parts


def test_an_empty_part_is_named_with_a_way_out_that_works(db) -> None:
    cid = _load(db, UNEVEN)
    result = export_gold(db, cid, split=SplitSpec((80, 10, 10), seed=0, by="document"))
    assert result.empty_parts and "test" in result.empty_parts
    assert "76 gold trees in 3 documents kept whole" in result.empty_message
    assert [a.spec.by for a in result.advice] == ["sentence"]  # no seed can do it here
    for advice in result.advice:
        assert _empty_parts(db, cid, advice.spec) == []
        assert sum(advice.sizes) == 76


def test_the_advice_finds_a_seed_that_keeps_documents_whole(db) -> None:
    cid = _load(db, {f"doc{i}": n for i, n in enumerate((8, 1, 1, 1, 1))})
    failing = next(
        seed
        for seed in range(100)
        if _empty_parts(db, cid, SplitSpec((8, 1, 1), seed=seed, by="document"))
    )
    result = export_gold(db, cid, split=SplitSpec((8, 1, 1), seed=failing, by="document"))
    by_document = [a for a in result.advice if a.spec.by == "document"]
    assert by_document and by_document[0].spec.seed > failing
    assert _empty_parts(db, cid, by_document[0].spec) == []


def test_the_transfer_page_warns_instead_of_downloading(db, login) -> None:
    cid = _load(db, UNEVEN)
    adj = login("adj")
    resp = adj.client.get(f"/transfer/export?corpus={cid}&split=80/10/10&seed=0&by=document")
    assert resp.status_code == 200 and resp.headers["content-type"].startswith("text/html")
    assert "Nothing was downloaded: this split leaves a part empty" in resp.text
    assert "76 gold trees in 3 documents kept whole" in resp.text
    assert "keep nothing together (shuffle sentences)" in resp.text
    assert db.scalar(select(func.count()).select_from(Event).where(Event.kind == "export")) == 0
    advice = resp.text.split('class="tf-advice"', 1)[1].split('href="', 1)[1].split('"', 1)[0]
    taken = adj.client.get(advice.replace("&amp;", "&"))
    assert taken.headers["content-type"] == "application/zip"
    names = zipfile.ZipFile(io.BytesIO(taken.content)).namelist()
    assert len(names) == 3
    anyway = resp.text.split('id="split-anyway"', 1)[0].rsplit('href="', 1)[1].split('"', 1)[0]
    kept = adj.client.get(anyway.replace("&amp;", "&"))
    assert kept.headers["content-type"] == "application/zip"


def test_the_cli_warns_with_the_same_advice(db, cli, tmp_path) -> None:  # noqa: F811
    _load(db, UNEVEN)
    name = db.scalar(select(Corpus.name))
    result = cli("export", "--corpus", name, "--split", "80/10/10", "--out", str(tmp_path))
    assert (
        "warning: the test part is empty" in result.output
        or "warning: the dev and test parts are empty" in result.output
    )
    assert "keep nothing together (--by sentence): train" in result.output
