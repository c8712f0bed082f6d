"""Bad import files get a message naming file, line (and column) and store nothing at all."""

from __future__ import annotations

import pytest

from app.services.errors import BadInput, NotFound
from app.services.imports import MAX_TOKENS, ImportFailed, import_bytes
from tests.app.row_counts import count_rows

GOOD_TREE = "(ROOT (S (NP-SBJ (DT The) (NN ferry) (CD {n})) (VP (VBD docked)) (. .)))"


def _gold_file(bad_line: str, at: int = 40, total: int = 45) -> bytes:
    lines = [GOOD_TREE.format(n=i) for i in range(1, total + 1)]
    lines[at - 1] = bad_line
    return ("\n".join(lines) + "\n").encode()


@pytest.fixture
def seeded(db):
    """A corpus with one document already stored, so 'nothing lost' can be checked too."""
    import_bytes(db, b"An older sentence stays .\n", source="old.txt", corpus_name="Harbour")
    return count_rows(db)


def _assert_nothing_stored(db, before) -> None:
    db.rollback()
    assert count_rows(db) == before


def test_imports_bad_empty_file(db, seeded) -> None:
    with pytest.raises(ImportFailed) as err:
        import_bytes(db, b"", source="empty.txt", corpus_name="Harbour")
    assert str(err.value.detail) == "empty.txt: the file is empty: there is nothing to import"
    _assert_nothing_stored(db, seeded)


def test_imports_bad_whitespace_only_file(db, seeded) -> None:
    with pytest.raises(ImportFailed, match="blank"):
        import_bytes(db, b"\n  \n\t\n", source="blank.ptb", corpus_name="Harbour", kind="gold")
    _assert_nothing_stored(db, seeded)


def test_imports_bad_non_utf8_names_byte_offset_and_line(db, seeded) -> None:
    data = b"First line .\nSecond line .\nCaf\xe9 opens at nine .\n"
    with pytest.raises(ImportFailed) as err:
        import_bytes(db, data, source="latin1.txt", corpus_name="Harbour")
    message = err.value.detail
    # offset of \xe9: len("First line .\n") + len("Second line .\n") + len("Caf") = 13+14+3
    assert "latin1.txt, line 3" in message
    assert "byte 0xE9 at byte offset 30" in message and "UTF-8" in message
    assert err.value.line == 3
    _assert_nothing_stored(db, seeded)


@pytest.mark.parametrize(
    "bad, column, words",
    [
        # one ')' too many: the reader stops at the stray bracket
        (GOOD_TREE.format(n=40) + ")", len(GOOD_TREE.format(n=40)) + 1, "unbalanced"),
        # a word beside a subtree
        ("(ROOT (S (NP-SBJ (DT The) ferry (NN boat)) (. .)))", 27, "beside a subtree"),
        # a node without children
        ("(ROOT (S (NP-SBJ ) (. .)))", 18, "no children"),
        # an opening bracket that is never closed: the error points at where that tree begins
        ("(ROOT (S (NP-SBJ (DT The) (NN ferry)) (. .))", 1, "never closed"),
    ],
)
def test_imports_bad_malformed_tree_in_line_40(db, seeded, bad, column, words) -> None:
    with pytest.raises(ImportFailed) as err:
        import_bytes(db, _gold_file(bad), source="seed.ptb", corpus_name="Harbour", kind="gold")
    assert err.value.line == 40, err.value.detail
    assert err.value.column == column, err.value.detail
    assert f"seed.ptb, line 40, column {column}:" in err.value.detail
    assert words in err.value.detail
    _assert_nothing_stored(db, seeded)


def test_imports_bad_tree_into_new_corpus_leaves_no_corpus(db) -> None:
    before = count_rows(db)
    with pytest.raises(ImportFailed):
        import_bytes(
            db,
            _gold_file("(ROOT (S (NN x)", at=3, total=5),
            source="x.ptb",
            corpus_name="Brand new",
            kind="gold",
        )
    _assert_nothing_stored(db, before)


def test_imports_bad_overlong_sentence_names_its_line(db, seeded) -> None:
    long_line = " ".join(["word"] * (MAX_TOKENS + 1))
    data = f"Short line .\n{long_line}\n".encode()
    with pytest.raises(ImportFailed, match=r"long.txt, line 2: 251 tokens"):
        import_bytes(db, data, source="long.txt", corpus_name="Harbour")
    _assert_nothing_stored(db, seeded)


def test_imports_bad_single_preterminal_is_not_a_sentence_tree(db, seeded) -> None:
    with pytest.raises(ImportFailed, match=r"p.ptb, line 2: .*single POS bracket"):
        import_bytes(
            db, b"(ROOT (S (NN a)))\n(NN b)\n", source="p.ptb", corpus_name="Harbour", kind="gold"
        )
    _assert_nothing_stored(db, seeded)


def test_imports_bad_unknown_annotator(db, seeded) -> None:
    with pytest.raises(NotFound, match="no user named 'nobody'"):
        import_bytes(
            db,
            b"(ROOT (S (NN a)))\n",
            source="a.ptb",
            corpus_name="Harbour",
            kind="annotation",
            annotator="nobody",
        )
    _assert_nothing_stored(db, seeded)


def test_imports_bad_kind_and_tokenizer(db) -> None:
    with pytest.raises(BadInput, match="unknown import kind"):
        import_bytes(db, b"a\n", source="a.txt", corpus_name="X", kind="poetry")
    with pytest.raises(BadInput, match="unknown tokenizer"):
        import_bytes(db, b"a\n", source="a.txt", corpus_name="X", tokenizer="magic")
