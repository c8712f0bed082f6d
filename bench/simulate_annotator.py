"""A simulated annotator: actions per sentence to turn the start tree into gold, plain editing
versus the parser in the loop, side by side in one run.

Data: the GUM trees (open data set: GUM, Zeldes 2017, CC BY; ../shared/data/gum-trees), words
only, sentences of at most 40 words from the last 10 files (by name). Two grammars: the GUM split
(the first 89 files: the test genre, voyage, is seen in training) and an unseen genre (every
file except the voyage ones, so the same test sentences are a genre the grammar never saw).

Every annotator starts from the consensus tree (as the Bench does) and knows the gold tree
(labels without function tags; the root does not count). It is done at gold's brackets and tags
(PARSEVAL does not see the order inside a unary chain).

The cost model: one action is one edit on the Bench, whatever keys or drags it takes.

* Hand edits, the same set for every annotator (the Bench's edits): add a bracket (a, or A to
  add and pin it), dissolve one (x), relabel one or retag a word (r), move a node with its
  subtree to another parent (m ... m, or a drag; only moves that keep the words in order, the
  rule of ``static/js/treemodel.js``'s reattach, ported here), move one edge of a bracket by one
  word ([ ] { }). Choosing words or walking to a node costs nothing.
* The distance to gold is the fewest single-bracket edits left (relabels, removals, additions,
  retags: :func:`distance`). The hand editor takes the move or edge step that lowers it most
  when that is by 2 or more (a reattachment: one move where two or more bracket edits would
  do); otherwise the next single edit in this order: missing gold brackets that cross nothing
  (widest first: the pin that tells the parser most), then wrong brackets, then wrong labels,
  then wrong tags (a missing bracket that crosses wrong ones waits until they are removed).
  Plain editing is that editor alone from start to gold.
* The loop: the same hand editor; each edit says something to the parser exactly as the page
  records it (``static/js/bench/loop.js``, withSaid: a bracket the annotator made, grew or
  relabelled is required, a span they emptied is forbidden, a tag they set is fixed). After
  each edit the page asks the grammar again around everything said
  (:func:`parser.reparse.reparse`, which favours the tree as it is) and shows its answer: the
  constrained consensus (the proposal) and the k best readings under the same constraints.
  Choosing one of them (the proposal with g, another with the keys that step through them) is
  **one action**; the simulated annotator, who sees what each would change, takes the one
  closest to gold when it is at least 2 edits closer than the tree (one edit closer would only
  pay for its own key). Before the first edit the same choice is offered (nothing said: the
  start's own k best readings). Stepping through an offer (G),
  reading it and rejecting it cost nothing here (a real annotator spends time on them, which
  the action count does not see: with 30 readings that time is not small).
* Taking a reading inside one constituent (the ``kNi`` conditions; the Bench's i, *Take
  inside*): the annotator chooses a constituent of the tree (walking to it is free, as above)
  and takes only what the reading shown has inside it (its brackets strictly inside the
  constituent's words and those words' tags; the constituent and everything outside stay:
  :func:`within`, the rule of treemodel.js's graftInside), **one action** like taking it whole.
  The simulated annotator considers every offered tree, whole and inside every constituent of
  the tree, and takes the closest to gold under the same 2-edit rule (ties: the earlier
  offer first, whole before inside, the wider constituent first). What it reads to find that
  pair is again not counted.

Conditions (``--conditions``, side by side in one run): ``plain``; ``proposal`` (the
constrained consensus alone is offered: the Bench before the readings were offered); ``kN``
(the proposal and the N best readings under the constraints); ``kNd`` (N distinct bracketings
drawn from 4N derivations, each with the proposal's tags) and ``kNdo`` (the same keeping each
one's own tags): :func:`parser.reparse.reparse` with ``distinct``. ``k30`` is what the Bench
offers (``OFFER_K`` in ``static/js/bench/loop.js``); ``kNi`` (any of the above with ``i``)
adds taking the shown reading inside a chosen constituent, which the Bench offers too
(``k30i`` is the Bench's page as it is). Before the first edit the Bench offers the
same (the start's k best readings, nothing said): ``--start-readings 0``, the default; N
models a page that offered only its readings list's N. An offer applied without the
annotator's choice made the tree worse in most sentences when measured before, so no
condition applies one unasked.

Usage: ``python bench/simulate_annotator.py [--limit N] [--skip M] [--conditions plain,k30]
[--only in|unseen] [--refine C] [--cache DIR]`` (N test sentences, default 40; ``--cache`` keeps
the two trained grammars between runs; ``--refine C`` uses refined grammars of C split-merge
cycles, the grammar the service trains once a corpus has enough gold and it scores better on
held-out gold, as it does with these training sets: ``app.services.refinement``). Prints per
condition the mean and median actions per sentence,
the hand edits and choices taken, and the ratio loop/plain.
"""

from __future__ import annotations

import argparse
import re
import sys
import time
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from nltk import Tree  # noqa: E402

from parser.chart import parse  # noqa: E402
from parser.errors import ConstraintError  # noqa: E402
from parser.grammar import Grammar, train_grammar  # noqa: E402
from parser.latent import train_refined  # noqa: E402
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


def distance(tree: Tree, gold: Tree) -> int:
    """Fewest single-bracket edits from ``tree`` to ``gold``: relabels, removals, additions,
    retags (no moves)."""
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


def single_edit(tree: Tree, gold: Tree) -> Tree | None:
    """The next single-bracket edit's result (see the module docstring), or None at gold."""
    have, want = brackets(tree), brackets(gold)
    missing = list((want - have).elements())
    extra = list((have - want).elements())
    items = constituents(tree)[1:]
    tags = pos_tags(tree)
    spans_have = {(s, e) for _, s, e in have}
    addable = [
        b
        for b in missing
        if (b[1], b[2]) not in spans_have
        and not any(_crosses((b[1], b[2]), (s, e)) for _, s, e in have)
    ]
    if addable:
        return _rebuild(tree, items + [max(addable, key=lambda b: (b[2] - b[1], -b[1]))], tags)
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
        items.remove(wrong[0])
        return _rebuild(tree, items, tags)
    if relabels:
        (lab, s, e), new = relabels[0]
        items[items.index((lab, s, e))] = (new, s, e)
        return _rebuild(tree, items, tags)
    if missing:  # a span present twice in gold (a unary chain) and once here
        return _rebuild(tree, items + [missing[0]], tags)
    gold_tags = pos_tags(gold)
    for i, (a, b) in enumerate(zip(tags, gold_tags, strict=True)):
        if a != b:
            tags[i] = b
            return _rebuild(tree, items, tags)
    return None


def _parents(spans: list[Bracket]) -> list[int]:
    """Parent index of each node of a pre-order span list (the root's is -1)."""
    out = [-1] * len(spans)
    stack: list[int] = []
    for k, (_, s, e) in enumerate(spans):
        while stack and not (spans[stack[-1]][1] <= s and e <= spans[stack[-1]][2]):
            stack.pop()
        out[k] = stack[-1] if stack else -1
        stack.append(k)
    return out


def moves(tree: Tree) -> list[Tree]:
    """Every tree one move away (a phrase or a word under another phrase, words kept in order:
    the rule of treemodel.js's reattach, which the Bench offers)."""
    spans = constituents(tree)
    parent = _parents(spans)
    n = len(words(tree))
    tags = pos_tags(tree)

    def up_from(k: int) -> list[int]:
        out = []
        while k >= 0:
            out.append(k)
            k = parent[k]
        return out

    refs: list[tuple[int, int, int]] = []  # (self index or -1, start, end)
    refs += [(k, s, e) for k, (_, s, e) in enumerate(spans) if k > 0]
    for i in range(n):
        owner = max(k for k, (_, s, e) in enumerate(spans) if s <= i < e)
        refs.append((-1 - owner, i, i + 1))
    out = []
    for self, a, b in refs:
        own_parent = parent[self] if self >= 0 else -1 - self
        up = up_from(own_parent)
        inside = set()
        if self >= 0:
            inside = {k for k in range(len(spans)) if self in up_from(parent[k])}
        for target, goal in enumerate(spans):
            if target in (own_parent, self) or target in inside:
                continue
            changed: dict[int, tuple[int, int]] = {}
            ok = True
            if target in up:
                for k in up[: up.index(target)]:
                    _, s, e = spans[k]
                    if (s, e) == (a, b) or (s != a and e != b):
                        ok = False
                        break
                    changed[k] = (b, e) if s == a else (s, a)
            else:
                if goal[2] != a and goal[1] != b:
                    continue
                over = up_from(target)
                common = next(k for k in over if k in up)
                for k in up[: up.index(common)]:
                    _, s, e = spans[k]
                    if (s, e) == (a, b):
                        ok = False
                        break
                    changed[k] = (b, e) if s == a else (s, a)
                for k in over[: over.index(common)]:
                    _, s, e = spans[k]
                    changed[k] = (min(s, a), max(e, b))
            if not ok:
                continue
            items = [(lab, *changed.get(k, (s, e))) for k, (lab, s, e) in enumerate(spans) if k > 0]
            out.append(_rebuild(tree, items, tags))
    return out


def edge_steps(tree: Tree) -> list[Tree]:
    """Every tree one edge step away (one edge of a bracket one word out or in: [ ] { })."""
    items = constituents(tree)[1:]
    tags = pos_tags(tree)
    n = len(tags)
    out = []
    for k, (lab, s, e) in enumerate(items):
        for ns, ne in ((s - 1, e), (s + 1, e), (s, e - 1), (s, e + 1)):
            if ns < 0 or ne > n or ns >= ne or (lab, ns, ne) in items:
                continue
            others = items[:k] + items[k + 1 :]
            if any(_crosses((ns, ne), (a, b)) for _, a, b in others):
                continue
            out.append(_rebuild(tree, others[:k] + [(lab, ns, ne)] + others[k:], tags))
    return out


def hand_edit(tree: Tree, gold: Tree) -> Tree | None:
    """The hand editor's next tree (see the module docstring), or None at gold."""
    d = distance(tree, gold)
    if d == 0:
        return None
    best, gain = None, 1
    for t in moves(tree) + edge_steps(tree):
        g = d - distance(t, gold)
        if g > gain:
            best, gain = t, g
    return best if best is not None else single_edit(tree, gold)


@dataclass
class Said_:
    """What the annotator has said, kept as the page keeps it (loop.js withSaid)."""

    required: list[tuple[int, int, str]] = field(default_factory=list)
    forbidden: list[tuple[int, int]] = field(default_factory=list)
    tags: dict[int, str] = field(default_factory=dict)

    def after(self, before: Tree, now: Tree) -> Said_:
        old = set(constituents(before)[1:])
        new = constituents(now)[1:]
        new_keys = set(new)
        new_spans = {(s, e) for _, s, e in new}
        req = [r for r in self.required if (r[2], r[0], r[1]) in new_keys]
        for lab, s, e in new:
            if (lab, s, e) not in old and (s, e, lab) not in req:
                req.append((s, e, lab))
        forb = [f for f in self.forbidden if f not in new_spans]
        for _, s, e in constituents(before)[1:]:
            if (s, e) not in new_spans and (s, e) not in forb:
                forb.append((s, e))
        tb, ta = pos_tags(before), pos_tags(now)
        tags = {i: t for i, t in self.tags.items() if ta[i] == t}
        for i, (a, b) in enumerate(zip(tb, ta, strict=True)):
            if a != b:
                tags[i] = b
        return Said_(req, forb, tags)

    def frozen(self) -> Said:
        return Said(
            required=tuple(self.required),
            forbidden=tuple(self.forbidden),
            tags=tuple(sorted(self.tags.items())),
        )


@dataclass
class Tally:
    actions: int = 0
    hand: int = 0
    choices: int = 0
    choices_beyond_proposal: int = 0
    reparses: int = 0
    seconds: float = 0.0


def offered(
    g: Grammar,
    word_list: list[str],
    said: Said_,
    tree: Tree,
    k: int,
    distinct: bool = True,
    own_tags: bool = False,
) -> list[Tree]:
    """What the page shows after an edit: the proposal, then the k best readings under the
    constraints (k = 0: the proposal alone; ``distinct``: as :func:`parser.reparse.reparse`
    makes them)."""
    try:
        out = reparse(
            g,
            word_list,
            said.frozen(),
            previous=tree,
            k=max(k, 1),
            distinct=distinct,
            own_tags=own_tags,
        )
    except ConstraintError:
        return []
    return [out.tree] + ([t for t, _ in out.readings[:k]] if k else [])


def choose(trees: list[Tree], tree: Tree, gold: Tree) -> tuple[Tree, int] | None:
    """The offered tree the annotator takes (closest to gold, at least 2 edits closer), with
    its place in the offer, or None."""
    d = distance(tree, gold)
    scored = [(distance(t, gold), i, t) for i, t in enumerate(trees)]
    if not scored:
        return None
    best_d, i, best = min(scored, key=lambda x: (x[0], x[1]))
    return (best, i) if best_d <= d - 2 else None


def _span_costs(have: Counter[Bracket], want: Counter[Bracket]) -> dict[tuple[int, int], int]:
    """Per span, the single-bracket edits :func:`distance` counts there (a relabel pairs an
    extra and a missing bracket of the same span, so the distance is a sum over spans)."""
    extra: Counter[tuple[int, int]] = Counter()
    missing: Counter[tuple[int, int]] = Counter()
    for (_, s, e), c in (have - want).items():
        extra[(s, e)] += c
    for (_, s, e), c in (want - have).items():
        missing[(s, e)] += c
    return {sp: max(extra[sp], missing[sp]) for sp in set(extra) | set(missing)}


def within(tree: Tree, reading: Tree, s: int, e: int) -> Tree:
    """``tree`` with what ``reading`` has inside the constituent over words s..e-1 (its
    brackets strictly inside the span and the tags of its words): the page's "take inside the
    chosen constituent" (``static/js/treemodel.js``, graftInside). The constituent and
    everything outside it stay."""
    items = [b for b in constituents(tree)[1:] if not (s <= b[1] and b[2] <= e) or b[1:] == (s, e)]
    items += [b for b in constituents(reading)[1:] if s <= b[1] and b[2] <= e and b[1:] != (s, e)]
    tags = pos_tags(tree)
    tags[s:e] = pos_tags(reading)[s:e]
    return _rebuild(tree, items, tags)


def choose_within(trees: list[Tree], tree: Tree, gold: Tree) -> tuple[Tree, int] | None:
    """The best of taking an offered tree whole or inside one constituent of the tree (the
    annotator chooses the constituent and takes the reading shown inside it: one action),
    when at least 2 edits closer to gold; with its place in the offer, or None."""
    d = distance(tree, gold)
    want = brackets(gold)
    gold_tags = pos_tags(gold)
    here = _span_costs(brackets(tree), want)
    here_tags = [a != b for a, b in zip(pos_tags(tree), gold_tags, strict=True)]
    nodes = sorted({(s, e) for _, s, e in constituents(tree)[1:]}, key=lambda x: x[0] - x[1])
    best: tuple[int, int, int, int] | None = None  # (distance, offer, start, end)
    for i, t in enumerate(trees):
        there = _span_costs(brackets(t), want)
        there_tags = [a != b for a, b in zip(pos_tags(t), gold_tags, strict=True)]
        whole = sum(there.values()) + sum(there_tags)
        cands = [(whole, i, -1, -1)]
        for s, e in nodes:
            gain = (
                sum(
                    here.get(sp, 0) - there.get(sp, 0)
                    for sp in set(here) | set(there)
                    if s <= sp[0] and sp[1] <= e and sp != (s, e)
                )
                + sum(here_tags[s:e])
                - sum(there_tags[s:e])
            )
            cands.append((d - gain, i, s, e))
        for c in cands:
            if best is None or c[0] < best[0]:
                best = c
    if best is None or best[0] > d - 2:
        return None
    _, i, s, e = best
    out = trees[i] if s < 0 else within(tree, trees[i], s, e)
    assert distance(out, gold) == best[0], (distance(out, gold), best)
    return out, i


def annotate(
    start: Tree,
    gold: Tree,
    ask: Callable[[Said_, Tree], list[Tree]] | None,
    tally: Tally,
    first: list[Tree] | None = None,
    chooser: Callable[[list[Tree], Tree, Tree], tuple[Tree, int] | None] = choose,
) -> None:
    """Edit ``start`` to gold; with ``ask`` (the loop) an offer follows every edit, and
    before the first edit the trees ``first`` are offered (None: what ``ask`` offers)."""
    tree = start
    said = Said_()
    if ask is not None:
        got = chooser(first if first is not None else ask(said, tree), tree, gold)
        tally.reparses += 1
        if got is not None:
            tree = got[0]
            tally.actions += 1
            tally.choices += 1
            tally.choices_beyond_proposal += got[1] > 0
    for _ in range(4 * len(words(gold)) + 20):
        nxt = hand_edit(tree, gold)
        if nxt is None:
            return
        said = said.after(tree, nxt)
        tree = nxt
        tally.actions += 1
        tally.hand += 1
        if ask is None or distance(tree, gold) < 2:
            continue
        tally.reparses += 1
        got = chooser(ask(said, tree), tree, gold)
        if got is not None:
            tree = got[0]
            said = said.after(tree, tree)
            tally.actions += 1
            tally.choices += 1
            tally.choices_beyond_proposal += got[1] > 0
    raise RuntimeError(f"did not reach gold: {tree} / {gold}")


def run(
    name: str, g: Grammar, tests: list[Tree], conds_spec: list[str], start_readings: int
) -> None:
    """``conds_spec``: ``plain``, ``proposal`` (the proposal alone), ``kN`` (the proposal and
    the N best readings under the constraints)."""
    t0 = time.process_time()
    conds = {c: Tally() for c in conds_spec}
    per_sentence: dict[str, list[int]] = {c: [] for c in conds}
    for gold in tests:
        wl = [str(w) for w in words(gold)]
        first = parse(g, wl, k=max(start_readings, 1), posteriors=True)
        start = first.consensus
        assert start is not None
        start_offer = first.trees[:start_readings] if start_readings else None
        for cname, tally in conds.items():
            before = tally.actions
            c0 = time.process_time()
            ask = None
            chooser = choose
            if cname != "plain":
                m = re.fullmatch(r"k(\d+)(do|d)?(i)?", cname)
                if cname != "proposal" and m is None:
                    sys.exit(f"unknown condition {cname!r}")
                kk = int(m.group(1)) if m else 0
                mode = (m.group(2) or "") if m else ""
                if m and m.group(3):
                    chooser = choose_within
                ask = lambda said, tree, kk=kk, wl=wl, mode=mode: offered(  # noqa: E731
                    g, wl, said, tree, kk, distinct=bool(mode), own_tags=mode == "do"
                )
            annotate(start, gold, ask, tally, start_offer, chooser)
            tally.seconds += time.process_time() - c0
            per_sentence[cname].append(tally.actions - before)
        print(
            f"  {len(next(iter(per_sentence.values())))}/{len(tests)} "
            + " ".join(f"{c} {sum(v) / len(v):.2f}" for c, v in per_sentence.items()),
            file=sys.stderr,
            flush=True,
        )
    n = len(tests)
    plain = conds["plain"].actions
    print(f"{name}: n = {n} sentences, CPU {time.process_time() - t0:.0f} s")
    for cname, t in conds.items():
        ps = sorted(per_sentence[cname])
        line = (
            f"  {cname:22s} actions per sentence {t.actions / n:.2f} (median {ps[n // 2]}; "
            f"hand edits {t.hand / n:.2f}, choices {t.choices / n:.2f}"
        )
        if cname != "plain":
            line += (
                f" of which beyond the proposal {t.choices_beyond_proposal / n:.2f};"
                f" re-parses {t.reparses / n:.1f}, CPU {t.seconds / max(t.reparses, 1):.2f}"
                f" s each) ratio loop/plain {t.actions / plain:.3f}"
            )
        else:
            line += ")"
        print(line, flush=True)


def grammar(
    name: str, trees: Callable[[], list[Tree]], cache: Path | None, refine: int = 0
) -> Grammar:
    """The plain grammar of ``trees``, or with ``refine`` the refined one of that many
    split-merge cycles (parser.latent.train_refined, as the service trains it)."""
    if refine:
        name = f"refined{refine}-{name}"
    if cache is not None and (cache / f"{name}.npz").exists():
        return Grammar.load(cache / f"{name}.npz")
    g = train_refined(trees(), refine) if refine else train_grammar(trees())
    if cache is not None:
        cache.mkdir(parents=True, exist_ok=True)
        g.save(cache / f"{name}.npz")
    return g


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--limit", type=int, default=40, help="test sentences (default 40)")
    ap.add_argument("--skip", type=int, default=0, help="test sentences to skip first")
    ap.add_argument(
        "--conditions",
        default="plain,k30",
        help="comma-separated: plain, proposal, kN (default plain,k30: the Bench's offer)",
    )
    ap.add_argument("--cache", type=Path, help="directory keeping the trained grammars")
    ap.add_argument(
        "--start-readings",
        type=int,
        default=0,
        help="readings offered before the first edit: 0 (default) the re-parse's offer, as "
        "the Bench makes it on opening; N the start's N best alone (a readings list of N)",
    )
    ap.add_argument(
        "--refine",
        type=int,
        default=0,
        help="split-merge cycles of a refined grammar (0, the default: the plain grammar)",
    )
    ap.add_argument("--only", choices=["in", "unseen"], help="one condition only")
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
    tests = tests[args.skip : args.skip + args.limit]
    conds = args.conditions.split(",")
    if args.only != "unseen":
        split = grammar(
            "gum-split", lambda: [t for f in files[:89] for t in read(f)], args.cache, args.refine
        )
        run(
            "in genre (GUM split: 89 files train, last 10 test)",
            split,
            tests,
            conds,
            args.start_readings,
        )
    if args.only != "in":
        genre = "GUM_" + files[-1].name.split("_")[1]
        unseen = grammar(
            f"without-{genre}",
            lambda: [t for f in files if not f.name.startswith(genre) for t in read(f)],
            args.cache,
            args.refine,
        )
        run(f"unseen genre (trained without {genre}_*)", unseen, tests, conds, args.start_readings)


if __name__ == "__main__":
    main()
