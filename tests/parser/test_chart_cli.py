"""The ``train`` and ``parse`` commands, driven through click's CliRunner."""

from __future__ import annotations

import json
from pathlib import Path

from click.testing import CliRunner

from parser.cli_parse import parse_command, train_command
from parser.grammar import Grammar
from parser.trees import read_tree

TREES = """(ROOT (S (NP (DT the) (NN dog)) (VP (VBD barked)) (. .)))
(ROOT (S (NP (DT a) (NN cat)) (VP (VBD saw) (NP (DT the) (NN dog))) (. .)))
(ROOT (S (NP (PRP it)) (VP (VBD ran) (PP (IN to) (NP (DT the) (NN park)))) (. .)))
"""


def _train(tmp_path: Path) -> Path:
    src = tmp_path / "trees.txt"
    src.write_text(TREES)
    out = tmp_path / "g.npz"
    result = CliRunner().invoke(
        train_command, [str(src), "--out", str(out), "--horizontal", "1", "--vertical", "2"]
    )
    assert result.exit_code == 0, result.output
    assert "rules:" in result.output and "vocabulary:" in result.output
    assert "time:" in result.output and "nonterminals:" in result.output
    return out


def test_cli_train_then_parse_one_line_per_input_line(tmp_path: Path) -> None:
    out = _train(tmp_path)
    assert Grammar.load(out).root_label == "ROOT"
    text = "the cat barked .\n\nit saw the park .\n"
    result = CliRunner().invoke(parse_command, ["--grammar", str(out)], input=text)
    assert result.exit_code == 0, result.output
    lines = result.output.split("\n")
    assert lines[-1] == "" and len(lines) == 4
    assert read_tree(lines[0]).leaves() == "the cat barked .".split()
    assert lines[1] == ""
    assert read_tree(lines[2]).leaves() == "it saw the park .".split()


def test_cli_train_min_context_backs_off_rare_labels(tmp_path: Path) -> None:
    # Common practice, no source: in these three trees the object NP (a base NP under VP,
    # NP^VP~b) occurs once, so a threshold of 3 backs it off to NP~b and 0 keeps it.
    src = tmp_path / "trees.txt"
    src.write_text(TREES)
    symbols = {}
    for threshold in ("0", "3"):
        out = tmp_path / f"g{threshold}.npz"
        result = CliRunner().invoke(
            train_command, [str(src), "--out", str(out), "--min-context", threshold]
        )
        assert result.exit_code == 0, result.output
        g = Grammar.load(out)
        assert g.meta["min_context"] == int(threshold)
        symbols[threshold] = set(g.symbols)
    assert "NP^VP~b" in symbols["0"] and "NP^VP~b" not in symbols["3"]
    assert "NP~b" in symbols["3"] and "NP~b" not in symbols["0"]


def test_cli_parse_consensus_writes_the_consensus_tree(tmp_path: Path) -> None:
    out = _train(tmp_path)
    text = "the cat saw the dog .\n"
    plain = CliRunner().invoke(parse_command, ["--grammar", str(out), "--consensus"], input=text)
    as_json = CliRunner().invoke(parse_command, ["--grammar", str(out), "--json"], input=text)
    assert plain.exit_code == 0 and as_json.exit_code == 0, plain.output + as_json.output
    row = json.loads(as_json.output)
    assert row["consensus"] is not None
    assert plain.output.strip() == row["consensus"]


def test_cli_parse_json_and_tagged(tmp_path: Path) -> None:
    out = _train(tmp_path)
    text = "the/DT dog/NN saw/VBD it/PRP ./.\nthe/DT cat/NN\n"
    result = CliRunner().invoke(
        parse_command, ["--grammar", str(out), "--tagged", "--json", "--k", "3"], input=text
    )
    assert result.exit_code == 0, result.output
    rows = [json.loads(line) for line in result.output.splitlines()]
    assert len(rows) == 2
    first = rows[0]
    assert set(first) == {
        "trees",
        "logprobs",
        "inside_logprob",
        "posteriors",
        "consensus",
        "fallback",
    }
    # A grammar of three trees has no parse for this one: no consensus for a fallback.
    assert first["fallback"] is True and first["consensus"] is None
    assert 1 <= len(first["trees"]) <= 3 and len(first["logprobs"]) == len(first["trees"])
    tree = read_tree(first["trees"][0])
    assert tree.pos() == [("the", "DT"), ("dog", "NN"), ("saw", "VBD"), ("it", "PRP"), (".", ".")]
    assert all(len(p) == 4 for p in first["posteriors"])


def test_cli_errors_name_the_place(tmp_path: Path) -> None:
    out = _train(tmp_path)
    result = CliRunner().invoke(
        parse_command, ["--grammar", str(out), "--tagged"], input="the/DT dog\n"
    )
    assert result.exit_code != 0
    assert "line 1, token 2" in result.output
    bad = tmp_path / "bad.txt"
    bad.write_text("(ROOT (S (NP dog)")
    result = CliRunner().invoke(train_command, [str(bad), "--out", str(tmp_path / "x.npz")])
    assert result.exit_code != 0
    assert "line 1" in result.output


def test_cli_train_with_reference_and_a_fixed_weight(tmp_path: Path) -> None:
    src = tmp_path / "domain.txt"
    src.write_text("(ROOT (S (NP (NNS gulls)) (VP (VBD circled)) (. .)))\n")
    ref = tmp_path / "reference.txt"
    ref.write_text(TREES)
    out = tmp_path / "g.npz"
    result = CliRunner().invoke(
        train_command,
        [str(src), "--out", str(out), "--reference", str(ref), "--weight", "rules=2,lexicon=4"],
    )
    assert result.exit_code == 0, result.output
    assert "trees: 1 in-domain, 3 reference" in result.output
    assert "weight: rules=2,lexicon=4" in result.output
    g = Grammar.load(out)
    assert g.meta["weighting"] == {"rules": 2.0, "lexicon": 4.0, "prior": None}
    assert {"gulls", "barked"} <= set(g.vocab)


def test_cli_train_auto_weight_below_twenty_heldout_takes_the_default(tmp_path: Path) -> None:
    src = tmp_path / "domain.txt"
    src.write_text("(ROOT (S (NP (NNS gulls)) (VP (VBD circled)) (. .)))\n" * 30)
    ref = tmp_path / "reference.txt"
    ref.write_text(TREES)
    result = CliRunner().invoke(
        train_command, [str(src), "--out", str(tmp_path / "g.npz"), "--reference", str(ref)]
    )
    assert result.exit_code == 0, result.output
    assert "27 in-domain trees to train, 3 held out" in result.output
    assert "(3 held-out trees (fewer than 20): default)" in result.output


def test_cli_train_refuses_a_bad_weight(tmp_path: Path) -> None:
    src = tmp_path / "domain.txt"
    src.write_text(TREES)
    result = CliRunner().invoke(
        train_command,
        [str(src), "--out", str(tmp_path / "g.npz"), "--reference", str(src), "--weight", "lots"],
    )
    assert result.exit_code != 0
    assert "weighting part 'lots'" in result.output


def test_cli_parse_lines_end_at_newlines_only(tmp_path: Path) -> None:
    # Common practice, no source: a form feed, U+2028 or U+0085 inside a line is not a line
    # break for a line-per-sentence file (POSIX text files end lines with newline only).
    out = _train(tmp_path)
    rows = [
        "the cat barked .",
        "it saw\x0cthe park .",
        "the dog\u2028barked .",
        "a cat\x85ran .",
        "the dog ran .",
    ]
    text = "\n".join(rows) + "\r\n" + "the cat saw the dog .\n"
    result = CliRunner().invoke(parse_command, ["--grammar", str(out)], input=text)
    assert result.exit_code == 0, result.output
    lines = result.output.split("\n")[:-1]
    assert len(lines) == 6  # 6 lines in, 6 out
    assert read_tree(lines[1]).leaves() == ["it", "saw", "the", "park", "."]
    assert read_tree(lines[5]).leaves() == "the cat saw the dog .".split()


def test_cli_parse_tagged_unknown_tag_is_an_error_naming_line_and_token(tmp_path: Path) -> None:
    out = _train(tmp_path)
    text = "the/DT cat/NN barked/VBD ./.\nit/PRP ran/VBZZ ./.\n"
    result = CliRunner().invoke(parse_command, ["--grammar", str(out), "--tagged"], input=text)
    assert result.exit_code != 0
    assert "line 2, token 2 'ran/VBZZ'" in result.output
    assert "no POS tag 'VBZZ'" in result.output
    good = CliRunner().invoke(
        parse_command, ["--grammar", str(out), "--tagged"], input="the/DT cat/NN barked/VBD ./.\n"
    )
    assert good.exit_code == 0 and read_tree(good.output).pos()[1] == ("cat", "NN")


def test_cli_train_refine_writes_a_refined_grammar(tmp_path: Path) -> None:
    src = Path(__file__).resolve().parent.parent / "data" / "latent_small.ptb"
    plain, refined = tmp_path / "plain.npz", tmp_path / "refined.npz"
    assert CliRunner().invoke(train_command, [str(src), "--out", str(plain)]).exit_code == 0
    result = CliRunner().invoke(train_command, [str(src), "--out", str(refined), "--refine", "1"])
    assert result.exit_code == 0, result.output
    assert "refined: 1 split-merge cycles" in result.output
    assert "cycle 1, EM iteration 1," in result.stderr
    g, base = Grammar.load(refined), Grammar.load(plain)
    assert g.meta["latent"]["base_symbols"] == base.n_symbols < g.n_symbols
    assert g.labels == base.labels and g.tags == base.tags
    parsed = CliRunner().invoke(
        parse_command, ["--grammar", str(refined)], input="the baker sold the bread .\n"
    )
    assert parsed.exit_code == 0, parsed.output
    assert read_tree(parsed.output).leaves() == "the baker sold the bread .".split()


def test_cli_train_refine_refuses_reference_trees(tmp_path: Path) -> None:
    src = tmp_path / "trees.txt"
    src.write_text(TREES)
    result = CliRunner().invoke(
        train_command,
        [str(src), "--out", str(tmp_path / "g.npz"), "--reference", str(src), "--refine", "1"],
    )
    assert result.exit_code != 0
    assert "--refine" in result.output and "--reference" in result.output
