"""Command-line front ends of the parser: ``train`` a grammar from bracketed trees, ``parse``
sentences from standard input. Both are commands of the ``treewright`` group (app/cli.py).

``train TREEFILE... --out GRAMMAR [--reference FILE...] [--weight W|auto] [--horizontal H]
[--vertical V] [--refine N]`` prints the grammar's size, the weight of the in-domain trees
against the reference trees (with ``auto``, each grid point's held-out F1) and the training
time; ``--refine N`` adds N split-merge cycles (:mod:`parser.latent`), printing each EM
iteration's training log-likelihood, and writes the refined grammar.

``parse --grammar GRAMMAR [--k K] [--tagged] [--json]`` reads one sentence per line (lines end
at a newline only; tokens split on whitespace; with ``--tagged`` each token is ``word/TAG``,
split at the last slash, and a tag the grammar does not know is an error naming the line and
token) and writes exactly one line per input line: the best tree in bracketed form (with
``--consensus`` the consensus tree of :mod:`parser.consensus` instead, the more
accurate one, at the cost of the posteriors), or with ``--json`` an object with the k trees,
their log-probabilities, the inside log-probability, the span posteriors, the consensus tree
and the fallback flag. Empty input lines give empty output lines (``--json``: an object with
no trees).
"""

from __future__ import annotations

import json
import math
import sys
import time
from pathlib import Path
from typing import Any

import click
from nltk import Tree
from tqdm import tqdm

from parser.adapt import choose_weighting, describe, heldout_split, parse_weighting
from parser.batch import parse_many
from parser.chart import Constraints, ParseResult
from parser.errors import ParserError
from parser.grammar import (
    DEFAULT_HORIZONTAL,
    DEFAULT_MIN_CONTEXT,
    DEFAULT_VERTICAL,
    Grammar,
    Weighting,
    train_grammar,
)
from parser.latent import DEFAULT_PRUNE, RefineOptions, refine
from parser.trees import read_trees, text_lines, write_tree


def _read_files(paths: tuple[Path, ...]) -> list[Tree]:
    trees: list[Tree] = []
    for path in paths:
        try:
            text = path.read_text(encoding="utf-8")
            trees.extend(read_trees(text, source=str(path)))
        except UnicodeDecodeError as exc:
            raise click.ClickException(f"{path}: not UTF-8 text ({exc})") from exc
        except ParserError as exc:
            raise click.ClickException(str(exc)) from exc
    return trees


@click.command("train")
@click.argument(
    "treefiles",
    nargs=-1,
    required=True,
    type=click.Path(exists=True, dir_okay=False, path_type=Path),
)
@click.option(
    "--out",
    "out",
    required=True,
    type=click.Path(dir_okay=False, path_type=Path),
    help="Where to write the grammar (.npz).",
)
@click.option(
    "--reference",
    "references",
    multiple=True,
    type=click.Path(exists=True, dir_okay=False, path_type=Path),
    help="A bracketed file of reference trees from another domain (repeatable); "
    "the TREEFILEs are the in-domain trees.",
)
@click.option(
    "--weight",
    "weight",
    default="auto",
    show_default=True,
    help="How much an in-domain tree counts against the reference trees: 'auto' "
    "(every 10th in-domain tree held out to choose from a small grid by "
    "labelled F1; a measured default below 20 held-out trees), a number, or "
    "'rules=N,lexicon=N'.",
)
@click.option(
    "--horizontal",
    type=click.IntRange(min=0),
    default=DEFAULT_HORIZONTAL,
    show_default=True,
    help="Previous siblings an intermediate node remembers.",
)
@click.option(
    "--vertical",
    type=click.IntRange(min=1),
    default=DEFAULT_VERTICAL,
    show_default=True,
    help="1: plain labels; 2: parent annotation; 3: grandparent.",
)
@click.option(
    "--min-context",
    type=click.IntRange(min=0),
    default=DEFAULT_MIN_CONTEXT,
    show_default=True,
    help="Labels seen fewer times fall back one markovization order (0: never).",
)
@click.option(
    "--refine",
    "cycles",
    type=click.IntRange(min=0),
    default=0,
    show_default=True,
    help="Split-merge cycles learning latent sub-symbols (0: none).",
)
def train_command(
    treefiles: tuple[Path, ...],
    out: Path,
    references: tuple[Path, ...],
    weight: str,
    horizontal: int,
    vertical: int,
    min_context: int,
    cycles: int,
) -> None:
    """Train a grammar from bracketed tree files (the in-domain trees), optionally with
    reference trees from another domain."""
    t0 = time.perf_counter()
    trees = _read_files(treefiles)
    reference = _read_files(references)
    options: dict[str, Any] = {
        "horizontal": horizontal,
        "vertical": vertical,
        "min_context": min_context,
    }
    choice = None
    if cycles and reference:
        raise click.UsageError(
            "--refine learns from the in-domain trees alone; leave out --reference"
        )
    try:
        if not reference:
            weighting = Weighting()
        elif weight.strip().lower() == "auto":
            train, held = heldout_split(trees)
            click.echo(
                f"choosing the weight: {len(train)} in-domain trees to train, {len(held)} held out",
                err=True,
            )
            choice = choose_weighting(train, held, reference, **options)
            weighting = choice.weighting
        else:
            weighting = parse_weighting(weight)
        with tqdm(
            total=len(trees) + len(reference),
            desc="training",
            unit="tree",
            file=sys.stderr,
            disable=len(trees) + len(reference) < 500,
        ) as bar:

            def progress(done: int, total: int) -> None:
                bar.update(done - bar.n)

            g = train_grammar(
                trees, reference=reference, weighting=weighting, progress=progress, **options
            )
        if cycles:
            g = _refined(g, trees, cycles)
        g.save(out)
    except ParserError as exc:
        raise click.ClickException(str(exc)) from exc
    seconds = time.perf_counter() - t0
    click.echo(
        f"trees: {len(trees)}" + (f" in-domain, {len(reference)} reference" if reference else "")
    )
    if reference:
        click.echo(
            f"weight: {describe(weighting)}" + (f" ({choice.reason})" if choice is not None else "")
        )
        for w, f1 in choice.scores if choice is not None else ():
            click.echo(f"  {describe(w):>24}  held-out F1 {f1:.4f}")
    click.echo(f"rules: {len(g.bin_logp)} binary, {len(g.un_logp)} unary edges")
    click.echo(
        f"nonterminals: {g.n_symbols} symbols ({len(g.labels)} labels, {len(g.tags)} POS tags)"
    )
    click.echo(f"vocabulary: {len(g.vocab)} words, {len(g.signatures)} unknown-word classes")
    click.echo(f"time: {seconds:.2f} s")
    click.echo(f"wrote {out}")


def _refined(g: Grammar, trees: list[Tree], cycles: int) -> Grammar:
    def progress(cycle: int, iteration: int, loglik: float) -> None:
        click.echo(
            f"refining: cycle {cycle}, EM iteration {iteration}, log-likelihood {loglik:.2f}",
            err=True,
        )

    refined = refine(g, trees, RefineOptions(cycles=cycles), progress=progress)
    click.echo(f"refined: {cycles} split-merge cycles, {refined.n_subsymbols} sub-symbols")
    return refined.to_grammar(prune=DEFAULT_PRUNE)


def _tokens(
    line: str, lineno: int, tagged: bool, known_tags: frozenset[str] = frozenset()
) -> tuple[list[str], list[str | None]]:
    words: list[str] = []
    tags: list[str | None] = []
    for col, token in enumerate(line.split(), 1):
        if not tagged:
            words.append(token)
            continue
        word, slash, tag = token.rpartition("/")
        if not slash or not word or not tag:
            raise click.ClickException(f"line {lineno}, token {col} {token!r}: expected word/TAG")
        if known_tags and tag not in known_tags:
            raise click.ClickException(
                f"line {lineno}, token {col} {token!r}: the grammar has no POS tag {tag!r} "
                f"(it knows {len(known_tags)}: {', '.join(sorted(known_tags))})"
            )
        words.append(word)
        tags.append(tag)
    return words, tags


def _finite(x: float | None) -> float | None:
    return x if x is not None and math.isfinite(x) else None


def _as_json(r: ParseResult | None) -> str:
    if r is None:
        return json.dumps(
            {
                "trees": [],
                "logprobs": [],
                "inside_logprob": None,
                "posteriors": [],
                "consensus": None,
                "fallback": False,
            }
        )
    return json.dumps(
        {
            "trees": [write_tree(t) for t in r.trees],
            "logprobs": [_finite(x) for x in r.logprobs],
            "inside_logprob": _finite(r.inside_logprob),
            "posteriors": [[lab, a, b, round(p, 6)] for lab, a, b, p in r.posteriors],
            "consensus": write_tree(r.consensus) if r.consensus is not None else None,
            "fallback": r.fallback,
        }
    )


@click.command("parse")
@click.option(
    "--grammar",
    "grammar_path",
    required=True,
    type=click.Path(exists=True, dir_okay=False, path_type=Path),
    help="A grammar written by train.",
)
@click.option(
    "--k",
    "k",
    type=click.IntRange(min=1),
    default=1,
    show_default=True,
    help="How many trees per sentence (with --json).",
)
@click.option("--tagged", is_flag=True, help="Tokens are word/TAG; the tags are kept.")
@click.option(
    "--json",
    "as_json",
    is_flag=True,
    help="One JSON object per line: trees, log-probabilities, posteriors, fallback.",
)
@click.option(
    "--consensus",
    "consensus",
    is_flag=True,
    help="Write the consensus tree (most probable brackets over all readings; more "
    "accurate, about three times slower) instead of the best single tree.",
)
@click.option(
    "--jobs", type=click.IntRange(min=1), default=2, show_default=True, help="Worker processes."
)
def parse_command(
    grammar_path: Path, k: int, tagged: bool, as_json: bool, consensus: bool, jobs: int
) -> None:
    """Parse sentences from standard input, one per line."""
    try:
        g = Grammar.load(grammar_path)
    except ParserError as exc:
        raise click.ClickException(str(exc)) from exc
    lines = text_lines(sys.stdin.read())  # newlines only: a form feed is no line break
    sentences: list[list[str]] = []
    constraints: list[Constraints | None] = []
    where: list[int] = []
    for lineno, line in enumerate(lines, 1):
        words, tags = _tokens(line, lineno, tagged, frozenset(g.tags))
        if words:
            sentences.append(words)
            constraints.append(Constraints(tags=tags) if tagged else None)
            where.append(lineno - 1)
    with tqdm(
        total=len(sentences),
        desc="parsing",
        unit="sentence",
        file=sys.stderr,
        disable=len(sentences) < 50,
    ) as bar:

        def progress(done: int, total: int) -> None:
            bar.update(done - bar.n)

        try:
            results = parse_many(
                g,
                sentences,
                k=k if as_json else 1,
                posteriors=as_json or consensus,
                constraints=constraints,
                processes=jobs,
                progress=progress,
            )
        except ParserError as exc:
            raise click.ClickException(str(exc)) from exc
    by_line: list[ParseResult | None] = [None] * len(lines)
    for x, r in zip(where, results, strict=True):
        by_line[x] = r
    for row in by_line:
        if as_json:
            click.echo(_as_json(row))
        elif row is None:
            click.echo("")
        else:
            best = row.consensus if consensus and row.consensus is not None else row.trees[0]
            click.echo(write_tree(best))
