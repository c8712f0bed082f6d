"""The inconsistency finder and the search, timed on GUM, and the finder's recall of planted
inconsistencies.

Reads ../shared/data/gum-trees (GUM, Zeldes 2017, CC BY) and prints, measured in this run:

1. the finder on all GUM trees imported as gold into a fresh SQLite database: a run as the
   service does it (``app.services.findings.run_now``: read the gold, find, store every
   finding) and the finder alone (``parser.variation.find_inconsistencies``), CPU and wall;
2. a word-string search over ``--sentences`` sentences (default 100,000: the GUM sentences
   repeated, imported as text into a second corpus) through the service
   (``app.services.search.search``): the first search (it builds the index) and the median of
   repeated searches of several patterns;
3. tree-shape searches over all GUM gold through the service, first and median;
4. recall of planted inconsistencies: the GUM trees are copied in memory and 100 randomly
   chosen repeated word strings (``--seed``) get their bracketing changed in one of their
   occurrences: a third relabelled, a third dropped (the constituent removed, its children
   kept), a third added (a new constituent over adjacent children that had none). Only
   strings analysed the same way wherever they occur are chosen, so that each plant is the
   only variation of its string. A plant is found when a finding lists the planted tree at
   the planted span. Printed: how many of the 100 are among the findings, the rank at which
   the 90th is reached and the precision at that cut (plants / findings ranked up to it; GUM's
   own inconsistencies count against it), and the findings the untouched copy already has.

Usage: .venv/bin/python bench/quality.py [--sentences N] [--seed S] [--skip-db]
Times vary on a shared machine: the script prints the load average beside them.
"""

from __future__ import annotations

import argparse
import copy
import os
import random
import statistics
import sys
import tempfile
import time
from collections import defaultdict
from collections.abc import Callable
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from nltk import Tree  # noqa: E402

from parser.trees import is_preterminal, read_trees, strip_label  # noqa: E402
from parser.variation import (  # noqa: E402
    WRAPPER_LABELS,
    FinderOptions,
    TreeSource,
    find_inconsistencies,
)

GUM = ROOT.parent / "shared" / "data" / "gum-trees"
LABELS = ["NP", "VP", "PP", "ADJP", "ADVP", "S", "SBAR", "NML", "QP", "PRN"]
WORD_PATTERNS = ["the * of", "in the", "it was", "said", "ferry"]
SHAPE_PATTERNS = [
    "(NP (DT the) ...)",
    "(VP ... (PP in (NP ...)))",
    "(S ... ~(NP ...))",
    "(SBAR ... (S ... (VP ... (NP) ...)))",
    "(NP|NML ... ~said ...)",
]


def load_gum() -> tuple[list[Path], list[Tree]]:
    if not GUM.is_dir():
        raise SystemExit(f"GUM trees not found at {GUM}")
    files = sorted(GUM.glob("*.ptb"))
    trees: list[Tree] = []
    for path in files:
        trees.extend(read_trees(path.read_text(encoding="utf-8"), source=path.name))
    return files, trees


def timed(fn: Callable[[], Any]) -> tuple[Any, float, float]:
    """(result, wall seconds, CPU seconds of this process)."""
    w, c = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - w, time.process_time() - c


def medians(fn: Callable[[], Any], runs: int) -> tuple[Any, float, float]:
    """(result, median wall ms, median CPU ms) of ``runs`` calls."""
    walls, cpus = [], []
    for _ in range(runs):
        out, wall, cpu = timed(fn)
        walls.append(wall * 1000)
        cpus.append(cpu * 1000)
    return out, statistics.median(walls), statistics.median(cpus)


def load() -> str:
    return "load average " + " ".join(f"{x:.2f}" for x in os.getloadavg())


# --------------------------------------------------------------------------------------------
# 1-3: through the service


def service_figures(files: list[Path], trees: list[Tree], n_sentences: int) -> None:
    from app.main import create_app
    from app.services import findings as finding_svc
    from app.services import search as search_svc
    from app.services.corpora import corpus_by_name, create_corpus
    from app.services.imports import import_bytes
    from app.settings import Settings

    data_dir = Path(tempfile.mkdtemp(prefix="tw-quality-"))
    app = create_app(Settings(data_dir=data_dir, secret_key="bench", training_in_process=True))
    factory = app.state.sessionmaker
    with factory() as db:
        create_corpus(db, "GUM gold", settings={"retrain_every": 0})
        create_corpus(db, "Many sentences", settings={"retrain_every": 0})
        db.commit()
        t0 = time.perf_counter()
        for path in files:
            import_bytes(
                db, path.read_bytes(), source=path.name, corpus_name="GUM gold", kind="gold"
            )
        print(f"imported {len(trees)} GUM trees as gold in {time.perf_counter() - t0:.1f} s")
        gold = corpus_by_name(db, "GUM gold")

        run, wall, cpu = timed(lambda: finding_svc.run_now(db, gold.id, reason="bench"))
        print(
            f"[1] finder run through the service on {run.trees} gold trees: {wall:.2f} s "
            f"wall, {cpu:.2f} s CPU ({run.message}; target < 10 s)  [{load()}]"
        )
        sources = [TreeSource(i, i, t) for i, t in enumerate(trees)]
        found, wall, cpu = timed(lambda: find_inconsistencies(sources))
        print(f"    the finder alone: {wall:.2f} s wall, {cpu:.2f} s CPU, {len(found)} findings")

        lines = [" ".join(t.leaves()) for t in trees]
        text = "\n".join(lines[i % len(lines)] for i in range(n_sentences)) + "\n"
        t0 = time.perf_counter()
        import_bytes(
            db, text.encode(), source="many.txt", corpus_name="Many sentences", kind="text"
        )
        print(f"imported {n_sentences} sentences as text in {time.perf_counter() - t0:.1f} s")
        many = corpus_by_name(db, "Many sentences")

        def search(corpus: Any, pattern: str, scope: str) -> int:
            return search_svc.search(db, corpus, None, pattern, scope=scope).total

        total, wall, cpu = timed(lambda: search(many, WORD_PATTERNS[0], "sentences"))
        print(
            f"[2] word-string search over {n_sentences} sentences: first search (builds the "
            f"index) {wall * 1000:.0f} ms wall, {cpu * 1000:.0f} ms CPU ({total} matches)"
        )
        for pattern in WORD_PATTERNS:
            total, wall, cpu = medians(lambda p=pattern: search(many, p, "sentences"), 7)
            print(
                f"    {pattern!r:12}: median {wall:6.1f} ms wall, {cpu:6.1f} ms CPU over 7; "
                f"{total} matching sentences (target < 200 ms)"
            )
        print(f"    [{load()}]")

        total, wall, cpu = timed(lambda: search(gold, SHAPE_PATTERNS[0], "gold"))
        print(
            f"[3] tree-shape search over {len(trees)} gold trees: first search (reads the "
            f"trees, builds the index) {wall * 1000:.0f} ms wall, {cpu * 1000:.0f} ms CPU"
        )
        for pattern in SHAPE_PATTERNS:
            total, wall, cpu = medians(lambda p=pattern: search(gold, p, "gold"), 5)
            print(
                f"    {pattern!r:40}: median {wall:6.1f} ms wall, {cpu:6.1f} ms CPU over 5; "
                f"{total} trees (target < 1000 ms)"
            )
        print(f"    [{load()}]")
    app.state.engine.dispose()


# --------------------------------------------------------------------------------------------
# 4: planted inconsistencies


def _phrases(tree: Tree) -> list[tuple[tuple[int, ...], int, int]]:
    """(tree position, start, end) of every phrasal node except a wrapper root."""
    out: list[tuple[tuple[int, ...], int, int]] = []

    def walk(node: Tree, pos: tuple[int, ...], start: int) -> int:
        if is_preterminal(node):
            return start + 1
        end = start
        for i, child in enumerate(node):
            end = walk(child, pos + (i,), end)
        if pos or strip_label(node.label()) not in WRAPPER_LABELS:
            out.append((pos, start, end))
        return end

    walk(tree, (), 0)
    return out


def _child_spans(node: Tree, start: int) -> list[tuple[int, int]]:
    spans, at = [], start
    for child in node:
        n = len(child.leaves()) if isinstance(child, Tree) else 1
        spans.append((at, at + n))
        at += n
    return spans


def plant(
    trees: list[Tree], seed: int, count: int, opts: FinderOptions
) -> tuple[list[Tree], list[tuple[int, int, int, str]]]:
    """A copy of ``trees`` with ``count`` plants; each (tree index, start, end, what)."""
    rng = random.Random(seed)
    words = [tuple(t.leaves()) for t in trees]
    places: dict[tuple[str, ...], list[tuple[int, int]]] = defaultdict(list)
    # the word strings that are a constituent somewhere
    strings = {
        words[ti][s:e]
        for ti, t in enumerate(trees)
        for _, s, e in _phrases(t)
        if opts.min_length <= e - s <= opts.max_length
    }
    # every occurrence of every candidate string (constituent or not)
    for ti, w in enumerate(words):
        for s in range(len(w)):
            for e in range(s + opts.min_length, min(len(w), s + opts.max_length) + 1):
                if w[s:e] in strings:
                    places[w[s:e]].append((ti, s))
    label_at: dict[tuple[int, int, int], list[str]] = defaultdict(list)
    for ti, t in enumerate(trees):
        for pos, s, e in _phrases(t):
            label_at[(ti, s, e)].append(strip_label(t[pos].label()))
    consistent = []
    for key, occ in places.items():
        if len(occ) < 2 or len({ti for ti, _ in occ}) < 2:
            continue
        seen = {tuple(label_at.get((ti, s, s + len(key)), [])) for ti, s in occ}
        if len(seen) == 1 and () not in seen:
            consistent.append(key)
    # strings never a constituent but adjacent children of one node somewhere
    addable: dict[tuple[str, ...], tuple[int, tuple[int, ...], int, int]] = {}
    for ti, t in enumerate(trees):
        for pos, s, _e in _phrases(t):
            node = t[pos]
            kids = _child_spans(node, s)
            for i in range(len(kids)):
                for j in range(i + 2, len(kids)):  # at least two children, not all of them
                    if i == 0 and j == len(kids):
                        continue
                    a, b = kids[i][0], kids[j - 1][1]
                    if not opts.min_length <= b - a <= 6:
                        continue
                    key = words[ti][a:b]
                    addable.setdefault(key, (ti, pos, i, j))
    rng.shuffle(consistent)
    add_keys = sorted(addable)
    rng.shuffle(add_keys)
    out = copy.deepcopy(trees)
    used_trees: set[int] = set()
    planted: list[tuple[int, int, int, str]] = []
    kinds = ["relabel", "drop", "add"]
    pools = {"relabel": iter(consistent), "drop": iter(consistent), "add": iter(add_keys)}
    used_keys: set[tuple[str, ...]] = set()
    while len(planted) < count:
        kind = kinds[len(planted) % 3]
        key = next(pools[kind])
        if key in used_keys:
            continue
        if kind == "add":
            if key in strings:  # it is a constituent somewhere: not a clean plant
                continue
            ti, pos, i, j = addable[key]
            if ti in used_trees or sum(1 for w in words if _contains(w, key)) < 2:
                continue
            node = out[ti][pos]
            start = _child_spans(trees[ti][pos], _start_of(trees[ti], pos))[i][0]
            label = rng.choice(LABELS)
            kids = [node[k] for k in range(i, j)]
            for k in range(j - 1, i - 1, -1):
                del node[k]
            node.insert(i, Tree(label, kids))
            planted.append((ti, start, start + len(key), f"add {label}"))
        else:
            ti, s = rng.choice(places[key])
            if ti in used_trees:
                continue
            e = s + len(key)
            pos = min((p for p, a, b in _phrases(trees[ti]) if (a, b) == (s, e)), key=len)
            node = out[ti][pos]
            if kind == "relabel":
                old = strip_label(node.label())
                new = rng.choice([x for x in LABELS if x != old])
                node.set_label(new)
                planted.append((ti, s, e, f"relabel {old}->{new}"))
            else:
                parent = out[ti][pos[:-1]]
                k = pos[-1]
                kids = list(node)
                del parent[k]
                for off, kid in enumerate(kids):
                    parent.insert(k + off, kid)
                planted.append((ti, s, e, f"drop {strip_label(node.label())}"))
        used_trees.add(ti)
        used_keys.add(key)
    return out, planted


def _contains(words: tuple[str, ...], key: tuple[str, ...]) -> bool:
    n = len(key)
    return any(words[s : s + n] == key for s in range(len(words) - n + 1))


def _start_of(tree: Tree, pos: tuple[int, ...]) -> int:
    """Word index where the node at ``pos`` starts."""
    start, node = 0, tree
    for i in pos:
        for k in range(i):
            child = node[k]
            start += len(child.leaves()) if isinstance(child, Tree) else 1
        node = node[i]
    return start


def recall_figures(trees: list[Tree], seed: int, count: int) -> None:
    opts = FinderOptions()
    base = find_inconsistencies([TreeSource(i, i, t) for i, t in enumerate(trees)], opts)
    changed, planted = plant(trees, seed, count, opts)
    found, wall, _ = timed(
        lambda: find_inconsistencies([TreeSource(i, i, t) for i, t in enumerate(changed)], opts)
    )
    where = {(ti, s, e): n for n, (ti, s, e, _) in enumerate(planted)}
    rank_of: dict[int, int] = {}
    bracket_rank_of: dict[int, int] = {}
    bracket_rank = 0
    for rank, f in enumerate(found, 1):
        bracket_rank += f.kind == "bracket"
        for o in f.occurrences:
            n = where.get((o.key, o.start, o.end))
            if n is not None and n not in rank_of and f.kind == "bracket":
                rank_of[n] = rank
                bracket_rank_of[n] = bracket_rank
    hits = sorted(rank_of.values())
    bracket_hits = sorted(bracket_rank_of.values())
    kinds = defaultdict(lambda: [0, 0])
    for n, (_, _, _, what) in enumerate(planted):
        kinds[what.split()[0]][1] += 1
        kinds[what.split()[0]][0] += n in rank_of
    print(
        f"[4] planted {len(planted)} inconsistencies (seed {seed}): {len(hits)} are among the "
        f"{len(found)} findings (target >= 90); by kind: "
        + ", ".join(f"{k} {a}/{b}" for k, (a, b) in sorted(kinds.items()))
        + f"; finder {wall:.1f} s"
    )
    base_keys = {f.key for f in base}
    new = [f for f in found if f.key not in base_keys]
    lifted = sum(
        1
        for f in found
        if f.kind == "bracket" and f.detail["rare_rule_here"] and _is_plant(f, where)
    )
    print(f"    plants whose finding is corroborated by a rare rule at the place: {lifted}")
    print(
        f"    the untouched copy has {len(base)} findings; the planted copy "
        f"{len(new)} new ones, {sum(1 for f in new if _is_plant(f, where))} of them plants"
    )
    for need in (50, 90, len(hits)):
        if need and len(hits) >= need:
            cut, bcut = hits[need - 1], bracket_hits[need - 1]
            print(
                f"    {need} plants are reached at rank {cut} of all findings: precision at "
                f"that cut {need / cut:.3f}; among the {bracket_rank} bracket findings alone "
                f"at rank {bcut}: precision {need / bcut:.3f}"
            )
    if len(hits) < 90:
        print("    fewer than 90 plants found: no cut reaches 90")
    missed = [planted[n] for n in range(len(planted)) if n not in rank_of]
    for ti, s, e, what in missed[:10]:
        print(f"    missed: tree {ti} words {s}-{e} ({what}): {' '.join(trees[ti].leaves()[s:e])}")


def _is_plant(f: Any, where: dict[tuple[int, int, int], int]) -> bool:
    return any((o.key, o.start, o.end) in where for o in f.occurrences)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sentences", type=int, default=100_000)
    ap.add_argument("--seed", type=int, default=2003)
    ap.add_argument("--plants", type=int, default=100)
    ap.add_argument("--skip-db", action="store_true", help="only the planted recall")
    args = ap.parse_args()
    files, trees = load_gum()
    print(f"{len(trees)} GUM trees from {len(files)} files  [{load()}]")
    if not args.skip_db:
        service_figures(files, trees, args.sentences)
    recall_figures(trees, args.seed, args.plants)


if __name__ == "__main__":
    main()
