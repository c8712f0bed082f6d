"""A simulated annotator: actions per sentence to turn the start tree into gold, plain editing
versus the parser in the loop, side by side in one run.

Data: the GUM trees (open data set: GUM, Zeldes 2017, CC BY; ../shared/data/gum-trees), words
only, sentences of at most 40 words from the last 10 files (by name). Two grammars: the GUM split
(the first 89 files: the test genre, voyage, is seen in training) and an unseen genre (every
file except the voyage ones, so the same test sentences are a genre the grammar never saw).

Both annotators start from the consensus tree (as the Bench does) and know the gold tree (labels
without function tags; the root does not count). One action is one edit on the Bench:

* plain editing: relabel a bracket whose span is right (1), remove a wrong bracket (1), add a
  missing one (1), retag a word (1); the count is the minimum, from the differing brackets.
* the loop: the same edits, one at a time, each saying something to the parser (an added
  bracket is added and pinned in one action, a relabel or retag is fixed, a removal forbidden);
  after each edit the page asks the grammar again around everything said
  (:func:`parser.reparse.reparse`, which favours the tree as it is) and offers its proposal when
  it would change something. ``loop`` counts taking an offer as one more action and takes it
  only when it brings the tree closer to gold (the annotator sees what it would change);
  ``loop, auto`` applies every plausible offer at no cost (the page's rule alone, no gold), and
  fixes whatever it breaks by hand.

The edit order: missing gold brackets that cross nothing (widest first), then wrong brackets,
then wrong labels, then wrong tags (a missing bracket that crosses wrong ones waits until they
are removed).

Usage: ``python bench/simulate_annotator.py [--limit N]`` (N test sentences, default 40).
Prints per condition the mean actions per sentence of each annotator and the ratio loop/plain.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections import Counter
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from nltk import Tree  # noqa: E402

from parser.chart import parse  # noqa: E402
from parser.grammar import Grammar, train_grammar  # noqa: E402
from parser.reparse import Said, reparse  # noqa: E402
from parser.trees import (  # noqa: E402
    constituents,
    pos_tags,
    read_trees,
    strip_function_tags,
    tree_from_spans,
    words,
)

GUM = Path(__file__).resolve().parent.parent.parent / "shared" / "data" / "gum-trees"
MAX_WORDS = 40

Bracket = tuple[str, int, int]


def read(path: Path) -> list[Tree]:
    return read_trees(path.read_text(encoding="utf-8"), source=path.name)


def brackets(tree: Tree) -> Counter[Bracket]:
    return Counter(constituents(tree)[1:])


def plain_actions(tree: Tree, gold: Tree) -> int:
    """Fewest Bench edits from ``tree`` to ``gold``: relabels, removals, additions, retags."""
    have, want = brackets(tree), brackets(gold)
    extra = list((have - want).elements())
    missing = list((want - have).elements())
    relabels = 0
    spare = Counter((s, e) for _, s, e in missing)
    for _, s, e in extra:
        if spare[(s, e)]:
            spare[(s, e)] -= 1
            relabels += 1
    retags = sum(a != b for a, b in zip(pos_tags(tree), pos_tags(gold), strict=True))
    return len(extra) + len(missing) - relabels + retags


def _crosses(a: tuple[int, int], b: tuple[int, int]) -> bool:
    return a[0] < b[0] < a[1] < b[1] or b[0] < a[0] < b[1] < a[1]


def _rebuild(tree: Tree, items: list[Bracket], tags: list[str]) -> Tree:
    return tree_from_spans(words(tree), tags, items, root=tree.label())


def next_edit(tree: Tree, gold: Tree) -> tuple[str, object] | None:
    """The simulated annotator's next edit (see the module docstring), or None at gold."""
    have, want = brackets(tree), brackets(gold)
    missing = list((want - have).elements())
    extra = list((have - want).elements())
    spans_have = {(s, e) for _, s, e in have}
    addable = [
        b
        for b in missing
        if (b[1], b[2]) not in spans_have
        and not any(_crosses((b[1], b[2]), (s, e)) for _, s, e in have)
    ]
    if addable:
        return "add", max(addable, key=lambda b: (b[2] - b[1], -b[1]))
    spare = Counter((s, e) for _, s, e in missing)
    relabels: list[tuple[Bracket, str]] = []
    wrong: list[Bracket] = []
    for b in extra:
        if spare[(b[1], b[2])]:
            spare[(b[1], b[2])] -= 1
            right = next(g for g in missing if (g[1], g[2]) == (b[1], b[2]))
            relabels.append((b, right[0]))
        else:
            wrong.append(b)
    if wrong:
        return "remove", wrong[0]
    if relabels:
        return "relabel", relabels[0]
    if missing:  # a span present twice in gold (a unary chain) and once here
        return "add", missing[0]
    for i, (a, b) in enumerate(zip(pos_tags(tree), pos_tags(gold), strict=True)):
        if a != b:
            return "retag", (i, b)
    return None


def apply_edit(tree: Tree, edit: tuple[str, object], said: dict) -> Tree:
    """``tree`` after the edit, with ``said`` (required, forbidden, tags) updated."""
    kind, what = edit
    items = constituents(tree)[1:]
    tags = pos_tags(tree)
    if kind == "add":
        lab, s, e = what  # type: ignore[misc]
        items.append((lab, s, e))
        said["required"][(s, e, lab)] = None
    elif kind == "remove":
        lab, s, e = what  # type: ignore[misc]
        items.remove((lab, s, e))
        if not any((a, b) == (s, e) for _, a, b in items):
            said["forbidden"][(s, e)] = None
        said["required"] = {k: None for k in said["required"] if k != (s, e, lab)}
    elif kind == "relabel":
        (lab, s, e), new = what  # type: ignore[misc]
        items[items.index((lab, s, e))] = (new, s, e)
        said["required"] = {k: None for k in said["required"] if k != (s, e, lab)}
        said["required"][(s, e, new)] = None
    else:
        i, tag = what  # type: ignore[misc]
        tags[i] = tag
        said["tags"][i] = tag
    return _rebuild(tree, items, tags)


def loop_actions(g: Grammar, start: Tree, gold: Tree, auto: bool) -> tuple[int, int, int]:
    """(actions, offers taken, offers that made the tree worse) of the loop annotator."""
    tree = start
    said: dict = {"required": {}, "forbidden": {}, "tags": {}}
    actions = taken = worse = 0
    for _ in range(4 * len(words(gold)) + 20):
        edit = next_edit(tree, gold)
        if edit is None:  # gold's brackets and tags (a unary chain's order is not counted)
            if plain_actions(tree, gold):
                raise RuntimeError(f"no edit left but not at gold: {tree} / {gold}")
            break
        tree = apply_edit(tree, edit, said)
        actions += 1
        out = reparse(
            g,
            words(gold),
            Said(
                required=tuple(said["required"]),
                forbidden=tuple(said["forbidden"]),
                tags=tuple(sorted(said["tags"].items())),
            ),
            previous=tree,
            k=1,
        )
        if out.tree == tree:
            continue
        before, after = plain_actions(tree, gold), plain_actions(out.tree, gold)
        if auto:
            if out.plausible:
                tree = out.tree
                taken += 1
                worse += after > before
        elif after < before - 1:  # worth the key that takes it
            tree = out.tree
            actions += 1
            taken += 1
    return actions, taken, worse


def run(name: str, g: Grammar, tests: list[Tree]) -> None:
    t0 = time.process_time()
    plain = loop = auto = 0
    taken = auto_taken = auto_worse = 0
    for gold in tests:
        start = parse(g, words(gold), posteriors=True).consensus
        assert start is not None
        plain += plain_actions(start, gold)
        a, t, _ = loop_actions(g, start, gold, auto=False)
        loop += a
        taken += t
        a, t, w = loop_actions(g, start, gold, auto=True)
        auto += a
        auto_taken += t
        auto_worse += w
    n = len(tests)
    print(f"{name}: {n} sentences, CPU {time.process_time() - t0:.0f} s")
    print(
        f"  actions per sentence: plain {plain / n:.2f}, loop {loop / n:.2f} "
        f"(offers taken {taken / n:.2f}), loop auto {auto / n:.2f} "
        f"(applied {auto_taken / n:.2f}, of which made it worse {auto_worse / n:.2f})"
    )
    print(f"  ratio loop/plain {loop / plain:.3f}, loop auto/plain {auto / plain:.3f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--limit", type=int, default=40, help="test sentences (default 40)")
    args = ap.parse_args()
    files = sorted(GUM.glob("*.ptb"))
    if not files:
        sys.exit(f"no GUM trees at {GUM}")
    tests = []
    for f in files[89:]:
        for t in read(f):
            t = strip_function_tags(t)
            if len(words(t)) <= MAX_WORDS:
                tests.append(t)
    tests = tests[: args.limit]
    split = train_grammar([t for f in files[:89] for t in read(f)])
    run("in genre (GUM split: 89 files train, last 10 test)", split, tests)
    genre = "GUM_" + files[-1].name.split("_")[1]
    unseen = train_grammar([t for f in files if not f.name.startswith(genre) for t in read(f)])
    run(f"unseen genre (trained without {genre}_*)", unseen, tests)


if __name__ == "__main__":
    main()
