"""`treewright search` and `treewright findings` through click's CliRunner."""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from app.cli import main
from tests.app.quality_helpers import GOLD


@pytest.fixture
def cli(settings, monkeypatch, tmp_path):  # type: ignore[no-untyped-def]
    if settings.database_url:
        monkeypatch.setenv("TREEWRIGHT_DATABASE_URL", settings.database_url)
    monkeypatch.setenv("TREEWRIGHT_DATA_DIR", str(settings.data_dir))
    runner = CliRunner()

    def run(*args: str, ok: bool = True):  # type: ignore[no-untyped-def]
        result = runner.invoke(main, list(args), catch_exceptions=False)
        if ok:
            assert result.exit_code == 0, result.output
        return result

    gold = tmp_path / "seed.ptb"
    gold.write_text("\n".join(GOLD) + "\n")
    run("import", str(gold), "--corpus", "Ferry", "--as", "gold")
    return run


def test_cli_search_prints_matches_with_the_span_marked(cli) -> None:
    out = cli("search", "(ADJP)", "--corpus", "Ferry").output
    assert "[the old pump] failed today ." in out and "[gold]" in out
    assert "1 match" in out
    words = cli("search", "the * pump", "--corpus", "Ferry", "--in", "sentences").output
    assert words.count("[the old pump]") == 3 and "3 matches" in words


def test_cli_search_bracketed_prints_trees(cli) -> None:
    out = cli("search", "(NP (DT the) (JJ old) _)", "--corpus", "Ferry", "--bracketed").output
    assert out.splitlines() == GOLD[:2]


def test_cli_search_bad_pattern_says_where(cli) -> None:
    result = cli("search", "(NP (DT", "--corpus", "Ferry", ok=False)
    assert result.exit_code == 1 and "column 8" in result.output


def test_cli_findings_needs_a_run_then_prints_them(cli) -> None:
    none = cli("findings", "--corpus", "Ferry", ok=False)
    assert none.exit_code == 1 and "--run" in none.output
    out = cli("findings", "--corpus", "Ferry", "--run").output
    assert "“the old pump” is NP ×2 / ADJP ×1" in out
    assert "[the old pump] failed today ." in out and "import" in out
    tags = cli("findings", "--corpus", "Ferry", "--kind", "tag").output
    assert "“bell”" in tags and "pump" not in tags
