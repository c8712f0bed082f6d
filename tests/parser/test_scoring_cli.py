"""The ``score`` command, driven through click's CliRunner."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from parser.cli_score import score

DATA = Path(__file__).resolve().parent.parent / "data"
GOLD = str(DATA / "score_gold.ptb")
TEST = str(DATA / "score_test.ptb")


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


def test_score_json_has_the_headline_keys(runner):
    result = runner.invoke(score, [GOLD, TEST, "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    # tree 1: 5 of 7 gold, 5 of 6 test (see test_scoring_examples); tree 2: 3 of 3
    assert data["sentences"] == 2
    assert data["precision"] == pytest.approx(8 / 9)
    assert data["recall"] == pytest.approx(8 / 10)
    assert data["f1"] == pytest.approx(16 / 19)
    assert data["exact"] == 0.5
    assert data["per_label"]["NP"]["gold"] == 5
    assert data["unlabelled"]["matched"] == 9


def test_score_table_is_readable(runner):
    result = runner.invoke(score, [GOLD, TEST])
    assert result.exit_code == 0, result.output
    assert "labelled brackets   88.89   80.00   84.21" in result.stdout
    assert "exact match         50.00 %" in result.stdout
    assert any(line.split()[:4] == ["NP", "5", "4", "4"] for line in result.stdout.splitlines())


def test_score_equivalent_labels_option(runner):
    result = runner.invoke(score, [GOLD, TEST, "--json", "--equivalent", "PP,ADVP"])
    data = json.loads(result.stdout)
    assert data["per_label"]["ADVP/PP"] == {
        "precision": 1.0,
        "recall": 1.0,
        "f1": 1.0,
        "matched": 1,
        "gold": 1,
        "test": 1,
    }


def test_score_keep_punctuation_option(runner):
    result = runner.invoke(score, [GOLD, TEST, "--json", "--keep-punctuation"])
    assert json.loads(result.stdout)["per_label"]["S"]["matched"] == 2


def test_score_stops_on_word_mismatch_naming_the_tree(runner, tmp_path):
    other = tmp_path / "other.ptb"
    other.write_text(
        "(ROOT (S (NP (DT the) (JJ old) (NN man)) (VP (VBD saw)) (. .)))\n"
        "(ROOT (S (NP (PRP You)) (VP (VBD ran))))\n"
    )
    result = runner.invoke(score, [GOLD, str(other)])
    assert result.exit_code != 0
    assert "tree 1: the words differ at word 5" in result.stderr
    assert result.stdout == ""


def test_score_stops_on_tree_count_mismatch(runner, tmp_path):
    short = tmp_path / "short.ptb"
    short.write_text((DATA / "score_gold.ptb").read_text().splitlines()[0] + "\n")
    result = runner.invoke(score, [GOLD, str(short), "--json"])
    assert result.exit_code != 0
    assert "tree 2" in result.stderr and "has 2 trees but" in result.stderr
    assert result.stdout == ""


def test_score_reports_syntax_errors_with_place(runner, tmp_path):
    bad = tmp_path / "bad.ptb"
    bad.write_text("(ROOT (S (NP (PRP I)) (VP (VBD ran))))\n(ROOT (S (NP )))\n")
    result = runner.invoke(score, [GOLD, str(bad)])
    assert result.exit_code != 0
    assert "bad.ptb:line 2, column 14" in result.stderr
