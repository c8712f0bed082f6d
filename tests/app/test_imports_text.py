"""Plain-text import: tokens, blank lines, the Treebank tokenizer, documents, duplicates."""

from __future__ import annotations

from sqlalchemy import select

from app.models import SENT_QUEUED, Corpus, Document, Sentence
from app.services.imports import import_bytes


def _sentences(db, corpus_name: str) -> list[Sentence]:
    corpus = db.scalar(select(Corpus).where(Corpus.name == corpus_name))
    return list(
        db.scalars(
            select(Sentence)
            .where(Sentence.corpus_id == corpus.id)
            .order_by(Sentence.document_id, Sentence.position)
        )
    )


def test_imports_text_one_sentence_per_line_split_on_whitespace(db) -> None:
    data = b"The ferry left at dawn .\n\n  Two   crates\tstayed on the pier .  \n"
    result = import_bytes(db, data, source="notes.txt", corpus_name="Pier notes")
    assert result.imported == 2 and result.blank_lines == 1
    assert result.document_name == "notes" and result.corpus_created
    rows = _sentences(db, "Pier notes")
    assert [r.tokens for r in rows] == [
        ["The", "ferry", "left", "at", "dawn", "."],
        ["Two", "crates", "stayed", "on", "the", "pier", "."],
    ]
    assert [r.position for r in rows] == [0, 1]
    assert {r.state for r in rows} == {SENT_QUEUED}


def test_imports_text_brackets_are_stored_in_treebank_form(db) -> None:
    import_bytes(db, b"The fee ( two crowns ) is due .\n", source="fees.txt", corpus_name="Fees")
    (row,) = _sentences(db, "Fees")
    assert row.tokens == ["The", "fee", "-LRB-", "two", "crowns", "-RRB-", "is", "due", "."]


def test_imports_text_treebank_tokenizer_splits_clitics_and_punctuation(db) -> None:
    # Expected tokens follow NLTK's TreebankWordTokenizer (reference library): "don't" ->
    # "do n't", the final period split off, double quotes as `` and ''.
    import_bytes(
        db,
        b'The skipper said "don\'t load it yet."\n',
        source="a.txt",
        corpus_name="Quotes",
        tokenizer="treebank",
    )
    (row,) = _sentences(db, "Quotes")
    assert row.tokens == [
        "The",
        "skipper",
        "said",
        "``",
        "do",
        "n't",
        "load",
        "it",
        "yet",
        ".",
        "''",
    ]


def test_imports_text_second_file_appends_to_a_named_document(db) -> None:
    import_bytes(db, b"One line here .\n", source="a.txt", corpus_name="C", document_name="log")
    result = import_bytes(
        db,
        b"Another line here .\nAnd a third .\n",
        source="b.txt",
        corpus_name="C",
        document_name="log",
    )
    assert not result.document_created and not result.corpus_created
    rows = _sentences(db, "C")
    assert [r.position for r in rows] == [0, 1, 2]
    assert db.scalar(select(Document.name).where(Document.id == rows[0].document_id)) == "log"


def test_imports_text_duplicates_within_file_and_corpus_are_reported(db) -> None:
    import_bytes(db, b"The tide is high .\n", source="old.txt", corpus_name="Tides")
    data = b"The gate is shut .\nThe tide is high .\nThe gate is shut .\nNew words here .\n"
    result = import_bytes(db, data, source="new.txt", corpus_name="Tides")
    described = sorted(d.describe() for d in result.duplicates)
    assert len(result.duplicates) == 2
    assert any("line 3 repeats line 1" in d for d in described)
    assert any("line 2 repeats sentence" in d and "'old'" in d for d in described)
    assert result.imported == 4  # reported, but kept by default


def test_imports_text_skip_duplicates_leaves_them_out(db) -> None:
    data = b"Same line .\nSame line .\nOther line .\n"
    result = import_bytes(db, data, source="d.txt", corpus_name="Dups", skip_duplicates=True)
    assert result.imported == 2 and result.skipped_duplicates == 1
    assert [r.text for r in _sentences(db, "Dups")] == ["Same line .", "Other line ."]


def test_imports_text_byte_order_mark_is_dropped(db) -> None:
    import_bytes(db, "\ufeffHello there .\n".encode(), source="bom.txt", corpus_name="B")
    (row,) = _sentences(db, "B")
    assert row.tokens[0] == "Hello"


def test_imports_text_lines_end_at_newlines_only(db) -> None:
    # Common practice, no source: a form feed or U+2028 inside a line does not split it (one
    # sentence per newline-ended line); a CRLF ending is a line end.
    data = ("The ferry left at dawn .\r\nTwo crates\x0cstayed .\nThe ramp\u2028was wet .\n").encode(
        "utf-8"
    )
    result = import_bytes(db, data, source="lines.txt", corpus_name="Line ends")
    assert result.imported == 3 and result.blank_lines == 0
    rows = _sentences(db, "Line ends")
    assert [r.tokens for r in rows] == [
        ["The", "ferry", "left", "at", "dawn", "."],
        ["Two", "crates", "stayed", "."],
        ["The", "ramp", "was", "wet", "."],
    ]
