"""The treewright CLI through click's CliRunner: import, export, users, assign, corpus, demo."""

from __future__ import annotations

import sqlite3

import pytest
from click.testing import CliRunner
from sqlalchemy import func, select

from app.cli import main
from app.models import Assignment, Sentence, User
from tests.app.conftest import sqlite_only
from tests.app.row_counts import count_rows

TREES = "".join(f"(ROOT (S (NP-SBJ-1 (NNP Boat{i})) (VP (VBD sank)) (. .)))\n" for i in range(10))


@pytest.fixture
def cli(settings, monkeypatch):
    """Run the CLI on the test's database (data folder, or the PostgreSQL URL)."""
    if settings.database_url:
        monkeypatch.setenv("TREEWRIGHT_DATABASE_URL", settings.database_url)
    monkeypatch.setenv("TREEWRIGHT_DATA_DIR", str(settings.data_dir))
    runner = CliRunner()

    def run(*args: str, input: str | None = None, ok: bool = True):
        result = runner.invoke(main, list(args), input=input, catch_exceptions=False)
        if ok:
            assert result.exit_code == 0, result.output
        return result

    return run


def test_cli_every_command_has_help(cli) -> None:
    top = cli("--help").output
    for name in (
        "serve",
        "demo",
        "import",
        "export",
        "user",
        "backup",
        "restore",
        "assign",
        "corpus",
        "train",
        "parse",
        "score",
    ):
        assert name in top
        assert "Usage:" in cli(name, "--help").output
    for sub in ("add", "list", "set-role", "disable", "enable", "set-password"):
        assert "Usage:" in cli("user", sub, "--help").output


def test_cli_import_text_and_gold_then_export(cli, db, tmp_path) -> None:
    text = tmp_path / "notes.txt"
    text.write_text("The gangway is wet .\nMind the gap .\n")
    gold = tmp_path / "seed.ptb"
    gold.write_text(TREES)
    out = cli("import", str(text), "--corpus", "Quay").output
    assert "2 sentences imported into 'Quay' / 'notes' as text" in out
    cli("import", str(gold), "--corpus", "Quay", "--as", "gold")
    exported = cli("export", "--corpus", "Quay", "--strip-function-tags").output
    assert exported.splitlines()[0] == "(ROOT (S (NP (NNP Boat0)) (VP (VBD sank)) (. .)))"
    assert len(exported.splitlines()) == 10


def test_cli_import_failure_names_line_and_stores_nothing(cli, db, tmp_path) -> None:
    bad = tmp_path / "bad.ptb"
    lines = TREES.splitlines()
    lines[6] = lines[6].replace("(VBD sank)", "(VBD sank) oops")
    bad.write_text("\n".join(lines) + "\n")
    before = count_rows(db)
    result = cli("import", str(bad), "--corpus", "Quay", "--as", "gold", ok=False)
    assert result.exit_code == 1
    assert "bad.ptb, line 7, column" in result.output
    db.rollback()
    assert count_rows(db) == before


def test_cli_import_non_utf8(cli, tmp_path) -> None:
    bad = tmp_path / "latin.txt"
    bad.write_bytes(b"ok line .\n\xff\xfe broken .\n")
    result = cli("import", str(bad), "--corpus", "Q", ok=False)
    assert "latin.txt, line 2" in result.output and "not UTF-8" in result.output


def test_cli_import_shows_progress_for_large_files(cli, tmp_path) -> None:
    big = tmp_path / "big.txt"
    big.write_text("".join(f"Sentence {i} of many ." + "\n" for i in range(700)))
    result = CliRunner().invoke(main, ["import", str(big), "--corpus", "Big"])
    assert result.exit_code == 0, result.output
    assert "700 sentences imported" in result.stdout
    assert "700/700" in result.stderr  # tqdm's bar went to standard error
    small = tmp_path / "small.txt"
    small.write_text("Only one .\n")
    quiet = CliRunner().invoke(main, ["import", str(small), "--corpus", "Big"])
    assert quiet.exit_code == 0 and "1/1" not in quiet.stderr


def test_cli_export_split_to_folder_and_zip(cli, tmp_path) -> None:
    gold = tmp_path / "seed.ptb"
    gold.write_text(TREES)
    cli("import", str(gold), "--corpus", "Quay", "--as", "gold")
    out = tmp_path / "out"
    cli(
        "export",
        "--corpus",
        "Quay",
        "--split",
        "80/10/10",
        "--by",
        "sentence",
        "--seed",
        "5",
        "--out",
        str(out),
    )
    counts = {p.name: len(p.read_text().splitlines()) for p in out.iterdir()}
    assert counts == {"quay-train.ptb": 8, "quay-dev.ptb": 1, "quay-test.ptb": 1}
    first = {p.name: p.read_text() for p in out.iterdir()}
    again = tmp_path / "again"
    cli(
        "export",
        "--corpus",
        "Quay",
        "--split",
        "80/10/10",
        "--by",
        "sentence",
        "--seed",
        "5",
        "--out",
        str(again),
    )
    assert {p.name: p.read_text() for p in again.iterdir()} == first
    cli(
        "export",
        "--corpus",
        "Quay",
        "--split",
        "8/1/1",
        "--zip",
        "--out",
        str(tmp_path / "gold.zip"),
    )
    assert (tmp_path / "gold.zip").stat().st_size > 0
    bad = cli("export", "--corpus", "Quay", "--split", "80/20", ok=False)
    assert bad.exit_code == 1 and "three numbers" in bad.output


def test_cli_export_unknown_corpus(cli) -> None:
    result = cli("export", "--corpus", "Nowhere", ok=False)
    assert result.exit_code == 1 and "no corpus named 'Nowhere'" in result.output


def test_cli_users(cli, db) -> None:
    out = cli("user", "add", "skipper", "--role", "adjudicator", "--generate").output
    assert out.startswith("created skipper (adjudicator), password: ")
    cli("user", "add", "mate", "--password", "plenty long pw")
    cli("user", "add", "cook", input="typed secret 1\ntyped secret 1\n")
    listing = cli("user", "list").output
    assert "skipper" in listing and "mate" in listing and "cook" in listing
    cli("user", "set-role", "mate", "admin")
    cli("user", "disable", "skipper")
    cli("user", "set-password", "cook", "--password", "another secret")
    db.expire_all()
    users = {u.username: u for u in db.scalars(select(User))}
    assert users["mate"].role == "admin" and not users["skipper"].active
    again = cli("user", "add", "mate", "--password", "plenty long pw", ok=False)
    assert again.exit_code == 1 and "taken" in again.output
    short = cli("user", "add", "x", "--password", "short", ok=False)
    assert "at least 10" in short.output


def test_cli_assign_and_corpus_remove(cli, db, people, tmp_path) -> None:
    text = tmp_path / "t.txt"
    text.write_text("".join(f"Line {i} .\n" for i in range(6)))
    cli("import", str(text), "--corpus", "Quay", "--assign")
    assert db.scalar(select(func.count()).select_from(Assignment)) == 12
    out = cli("assign", "--corpus", "Quay").output
    assert out.startswith("0 assignments made")
    listing = cli("corpus", "list").output
    assert "Quay" in listing and "queued 6" in listing
    wrong = cli("corpus", "remove", "Quay", "--confirm", "quay", ok=False)
    assert wrong.exit_code == 1 and "type its name exactly" in wrong.output
    cli("corpus", "remove", "Quay", input="Quay\n")
    db.expire_all()
    assert db.scalar(select(func.count()).select_from(Sentence)) == 0


def test_cli_demo_refuses_a_team_database(cli, tmp_path) -> None:
    text = tmp_path / "t.txt"
    text.write_text("Real team work .\n")
    cli("import", str(text), "--corpus", "Our treebank")
    result = cli("demo", "--no-serve", ok=False)
    assert result.exit_code == 1 and "refusing to replace it" in result.output


def test_cli_demo_loads_and_replaces_a_demo(cli, settings) -> None:
    first = cli("demo", "--no-serve", "--no-train").output
    assert "demo loaded: 75 gold trees" in first
    logins = [line.split() for line in first.splitlines() if line.startswith("  ")]
    assert [row[:2] for row in logins] == [
        ["purser", "admin"],
        ["netmender", "annotator"],
        ["tidewatch", "adjudicator"],
    ]
    second = cli("demo", "--no-serve", "--no-train").output
    again = [line.split() for line in second.splitlines() if line.startswith("  ")]
    assert [row[2] for row in again] != [row[2] for row in logins]  # fresh passwords
    assert "kept a copy" not in second  # a demo database is replaced without a copy
    listing = cli("corpus", "list").output
    assert listing.count("Saltmarrow Ferry Cooperative") == 1 and "gold 75" in listing


@sqlite_only()
def test_cli_demo_force_keeps_a_copy_of_the_team_database(cli, settings, tmp_path) -> None:
    text = tmp_path / "t.txt"
    text.write_text("Real team work .\n")
    cli("import", str(text), "--corpus", "Our treebank")
    out = cli("demo", "--no-serve", "--no-train", "--force").output
    assert "kept a copy of the previous database" in out
    (copy,) = (settings.data_dir / "backups").glob("before-demo-*.db")
    conn = sqlite3.connect(copy)
    assert conn.execute("SELECT name FROM corpora").fetchall() == [("Our treebank",)]
    conn.close()


def test_cli_reference_add_and_list(cli, db, tmp_path) -> None:
    gold = tmp_path / "seed.ptb"
    gold.write_text(TREES)
    cli("import", str(gold), "--corpus", "Quay", "--as", "gold")
    older = tmp_path / "older.ptb"
    older.write_text("(ROOT (S (NP (NNS Gulls)) (VP (VBD circled)) (. .)))\n" * 4)
    licence = tmp_path / "LICENCE.txt"
    licence.write_text("Invented trees; free to use.")
    out = cli(
        "reference",
        "add",
        str(older),
        "--corpus",
        "Quay",
        "--name",
        "older notes",
        "--source",
        "the team's first season",
        "--licence-file",
        str(licence),
    ).output
    assert "reference set 'older notes' of corpus 'Quay': 4 trees, 12 words" in out
    listed = cli("reference", "list", "--corpus", "Quay").output
    assert "older notes  (4 trees; in use)  the team's first season" in listed
    # the reference trees are not sentences of the corpus
    assert db.scalar(select(func.count(Sentence.id))) == 10


def test_cli_members_add_list_and_remove(cli, db, people) -> None:
    from app.services.visibility import member_corpus_ids
    from tests.app.bench_helpers import assign, make_corpus

    corpus, (sentence,) = make_corpus(db, ["the tide turned ."], name="Harbour")
    assign(db, [sentence], people.ann1)
    out = cli("members", "--corpus", "Harbour", "--add", "ann2", "--add", "ann1").output
    assert "ann2: added" in out and "ann1: added" in out
    assert "ann1  annotator  on the list  1 sentence assigned" in out
    assert "ann2  annotator  on the list  0 sentences assigned" in out
    db.expire_all()
    assert corpus.id in member_corpus_ids(db, people.ann2)
    out = cli("members", "--corpus", "Harbour", "--remove", "ann2", "--remove", "ann1").output
    assert "ann2: taken off the list\n" in out
    assert "ann1: taken off the list (still reads it: 1 sentence assigned)" in out
    assert "ann1  annotator  by assignment" in out and "ann2" not in out.split("\n", 2)[2]
    db.expire_all()
    assert corpus.id not in member_corpus_ids(db, people.ann2)
    wrong = cli("members", "--corpus", "Harbour", "--remove", "ann2", ok=False)
    assert wrong.exit_code == 1 and "ann2 is not on the member list of Harbour" in wrong.output
