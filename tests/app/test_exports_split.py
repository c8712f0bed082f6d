"""Gold export: one tree per line, function tags kept or stripped, deterministic splits."""

from __future__ import annotations

import io
import zipfile

import pytest
from sqlalchemy import select

from app.models import Corpus, Document, Gold, utcnow
from app.services.errors import BadInput
from app.services.exports import SplitSpec, export_gold, parse_ratios
from app.services.imports import import_bytes

TEMPLATE = "(ROOT (S (NP-SBJ-1 (NNP Doc{d}) (CD {i})) (VP (VBD sailed)) (. .)))"


def _load(db, docs: dict[str, int]) -> int:
    """Gold trees in several documents; returns the corpus id."""
    for d, (name, count) in enumerate(docs.items()):
        text = "\n".join(TEMPLATE.format(d=d, i=i) for i in range(count)) + "\n"
        import_bytes(db, text.encode(), source=f"{name}.ptb", corpus_name="Split", kind="gold")
    return db.scalar(select(Corpus.id).where(Corpus.name == "Split"))


def _trees(text: str) -> list[str]:
    return [line for line in text.splitlines() if line]


def test_exports_whole_corpus_keeps_order_and_function_tags(db) -> None:
    cid = _load(db, {"a": 2, "b": 1})
    result = export_gold(db, cid)
    assert list(result.files) == ["split.ptb"]
    assert _trees(result.files["split.ptb"]) == [
        TEMPLATE.format(d=0, i=0),
        TEMPLATE.format(d=0, i=1),
        TEMPLATE.format(d=1, i=0),
    ]


def test_exports_strip_function_tags(db) -> None:
    cid = _load(db, {"a": 1})
    text = export_gold(db, cid, function_tags=False).files["split.ptb"]
    assert text == "(ROOT (S (NP (NNP Doc0) (CD 0)) (VP (VBD sailed)) (. .)))\n"


def test_exports_one_document(db) -> None:
    cid = _load(db, {"a": 2, "b": 3})
    doc_b = db.scalar(select(Document.id).where(Document.name == "b"))
    result = export_gold(db, cid, document_id=doc_b)
    (name,) = result.files
    assert name == "split-b.ptb" and result.counts[name] == 3
    assert all("Doc1" in line for line in _trees(result.files[name]))


def test_exports_retired_gold_is_left_out_and_newest_wins(db) -> None:
    cid = _load(db, {"a": 1})
    old = db.scalar(select(Gold))
    old.retired_at = utcnow()
    newer = "(ROOT (FRAG (NP (NNP Doc0) (CD 0)) (VP (VBD sailed)) (. .)))"
    db.add(Gold(sentence_id=old.sentence_id, tree=newer, provenance="adjudication"))
    db.commit()
    assert _trees(export_gold(db, cid).files["split.ptb"]) == [newer]


def test_exports_split_same_seed_same_files(db) -> None:
    cid = _load(db, {f"d{k}": 7 + k for k in range(6)})
    for by in ("sentence", "document"):
        spec = SplitSpec((0.7, 0.15, 0.15), seed=42, by=by)
        first = export_gold(db, cid, split=spec)
        again = export_gold(db, cid, split=spec)
        assert first.files == again.files
        assert first.zip_bytes() == again.zip_bytes()
        other = export_gold(db, cid, split=SplitSpec((0.7, 0.15, 0.15), seed=7, by=by))
        assert other.files != first.files  # a different seed shuffles differently


def test_exports_split_by_sentence_respects_ratios(db) -> None:
    cid = _load(db, {"a": 60, "b": 40})  # 100 gold trees
    result = export_gold(db, cid, split=SplitSpec((8, 1, 1), seed=3, by="sentence"))
    assert result.counts == {"split-train.ptb": 80, "split-dev.ptb": 10, "split-test.ptb": 10}
    every = [t for text in result.files.values() for t in _trees(text)]
    assert len(every) == len(set(every)) == 100  # a partition: nothing lost, nothing twice


def test_exports_split_by_sentence_rounding_adds_up(db) -> None:
    cid = _load(db, {"a": 7})
    result = export_gold(db, cid, split=SplitSpec((1, 1, 1), seed=0, by="sentence"))
    assert sorted(result.counts.values()) == [2, 2, 3]


def test_exports_split_by_document_keeps_documents_whole(db) -> None:
    sizes = {f"d{k}": 5 + (k % 4) for k in range(12)}
    cid = _load(db, sizes)
    result = export_gold(db, cid, split=SplitSpec((0.8, 0.1, 0.1), seed=11, by="document"))
    homes: dict[str, set[str]] = {}
    for name, text in result.files.items():
        for line in _trees(text):
            doc = line.split("(NNP ")[1].split(")")[0]
            homes.setdefault(doc, set()).add(name)
    assert all(len(parts) == 1 for parts in homes.values()), homes
    assert len(homes) == 12
    total = sum(sizes.values())
    assert sum(result.counts.values()) == total
    # A document goes to the part furthest below its share, so no part overshoots its share
    # by more than one document (at most 8 trees here).
    for name, share in (("split-train.ptb", 0.8), ("split-dev.ptb", 0.1), ("split-test.ptb", 0.1)):
        assert 0 < result.counts[name] <= share * total + 8, result.counts


def test_exports_zero_ratio_part_gets_no_file(db) -> None:
    cid = _load(db, {"a": 4})
    result = export_gold(db, cid, split=SplitSpec((3, 1, 0), seed=0, by="sentence"))
    assert set(result.files) == {"split-train.ptb", "split-dev.ptb"}
    archive = zipfile.ZipFile(io.BytesIO(result.zip_bytes()))
    assert sorted(archive.namelist()) == ["split-dev.ptb", "split-train.ptb"]


def test_exports_empty_corpus_warns(db) -> None:
    import_bytes(db, b"No gold here .\n", source="t.txt", corpus_name="Split")
    cid = db.scalar(select(Corpus.id))
    result = export_gold(db, cid)
    assert result.files == {"split.ptb": ""} and result.warnings


@pytest.mark.parametrize(
    "text, expected",
    [("80/10/10", (80.0, 10.0, 10.0)), ("0.8,0.1,0.1", (0.8, 0.1, 0.1)), ("8:1:1", (8, 1, 1))],
)
def test_exports_parse_ratios(text, expected) -> None:
    assert parse_ratios(text) == expected


@pytest.mark.parametrize("text", ["80/20", "a/b/c", ""])
def test_exports_parse_ratios_rejects(text) -> None:
    with pytest.raises(BadInput, match="ratios"):
        parse_ratios(text)


def test_exports_split_spec_rejects_bad_values() -> None:
    with pytest.raises(BadInput):
        SplitSpec((0, 0, 0))
    with pytest.raises(BadInput):
        SplitSpec((1, -1, 1))
    with pytest.raises(BadInput):
        SplitSpec((1, 1, 1), by="chapter")


def test_exports_are_noted_in_the_event_log(login, db) -> None:
    from app.models import Event

    cid = _load(db, {"a": 3})
    adj = login("adj")
    # one document cannot fill two parts: "anyway" downloads the split as it is
    assert (
        adj.client.get(f"/transfer/export?corpus={cid}&split=2/1/0&seed=4&anyway=true").status_code
        == 200
    )
    event = db.scalar(select(Event).where(Event.kind == "export"))
    assert event.user_id == adj.user_id and event.corpus_id == cid
    assert event.detail["split"] == {"ratios": [2.0, 1.0, 0.0], "seed": 4, "by": "document"}
