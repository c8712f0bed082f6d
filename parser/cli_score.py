"""``treewright score GOLD TEST``: labelled bracket scores of one bracketed file against another.

The trees are paired in order. A pair whose words differ, or a tree without a partner, stops the
command with a message naming the tree (1-based) and a non-zero exit code.
"""

from __future__ import annotations

import json
from pathlib import Path

import click
from nltk import Tree

from parser.errors import BracketSyntaxError
from parser.scoring import (
    DEFAULT_DELETE_POS,
    CorpusScore,
    ScoringOptions,
    WordMismatchError,
    score_corpus,
)
from parser.trees import read_trees


def _read(path: Path) -> list[Tree]:
    try:
        return read_trees(path.read_text(encoding="utf-8"), source=str(path))
    except BracketSyntaxError as err:
        raise click.ClickException(str(err)) from None
    except UnicodeDecodeError as err:
        raise click.ClickException(f"{path}: not UTF-8 text ({err.reason})") from None


def _table(result: CorpusScore) -> str:
    pct = "{:6.2f}".format
    lines = [
        f"sentences          {result.sentences}",
        "                        P       R      F1",
        f"labelled brackets  {pct(100 * result.precision)}  {pct(100 * result.recall)}  "
        f"{pct(100 * result.f1)}",
        f"unlabelled         {pct(100 * result.unlabelled.precision)}  "
        f"{pct(100 * result.unlabelled.recall)}  {pct(100 * result.unlabelled.f1)}",
        f"exact match        {pct(100 * result.exact)} %",
        f"mean crossing      {result.mean_crossing:6.2f}",
        f"POS accuracy       {pct(100 * result.pos_accuracy)} %",
        "",
        f"{'label':<12}{'gold':>7}{'test':>7}{'matched':>9}{'P':>8}{'R':>8}{'F1':>8}",
    ]
    rows = sorted(result.per_label.items(), key=lambda kv: (-kv[1].gold, kv[0]))
    for label, c in rows:
        lines.append(
            f"{label:<12}{c.gold:>7}{c.test:>7}{c.matched:>9}"
            f"{100 * c.precision:>8.2f}{100 * c.recall:>8.2f}{100 * c.f1:>8.2f}"
        )
    return "\n".join(lines)


@click.command("score")
@click.argument("gold", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.argument("test", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of a table.")
@click.option(
    "--keep-punctuation",
    is_flag=True,
    help=f"Count words tagged {' '.join(sorted(DEFAULT_DELETE_POS))} too.",
)
@click.option(
    "--equivalent",
    "equivalent",
    multiple=True,
    metavar="A,B",
    help="Treat these labels as one (repeatable), e.g. --equivalent ADVP,PRT.",
)
def score(
    gold: Path, test: Path, as_json: bool, keep_punctuation: bool, equivalent: tuple[str, ...]
) -> None:
    """Score the bracketed trees in TEST against those in GOLD, tree by tree."""
    options = ScoringOptions(
        delete_pos=frozenset() if keep_punctuation else DEFAULT_DELETE_POS,
        equivalences=tuple(frozenset(x for x in group.split(",") if x) for group in equivalent),
    )
    gold_trees = _read(gold)
    test_trees = _read(test)
    try:
        result = score_corpus(zip(gold_trees, test_trees, strict=False), options)
    except WordMismatchError as err:
        raise click.ClickException(f"{err} ({gold} vs {test})") from None
    if len(gold_trees) != len(test_trees):
        first = min(len(gold_trees), len(test_trees)) + 1
        raise click.ClickException(
            f"tree {first}: {gold} has {len(gold_trees)} trees but {test} has "
            f"{len(test_trees)}; tree {first} has no partner"
        )
    if as_json:
        click.echo(json.dumps(result.to_dict(), indent=2))
    else:
        click.echo(_table(result))
