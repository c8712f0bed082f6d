"""Re-parse a sentence around everything the annotator has said, and judge the result.

What it computes
    :func:`reparse` takes what the annotator has said about a sentence (:class:`Said`: the
    labelled brackets they pinned, added or relabelled, which must be in the result; the
    brackets they removed, which must not; the POS tags they pinned or corrected, which are
    fixed) and the tree being re-parsed, and returns

    * the **proposal**: the consensus tree (:mod:`parser.consensus`) of the span posteriors
      *under those constraints*, with the brackets of the previous tree favoured by
      :data:`KEEP_BONUS` (the rule that keeps the previous tree where the evidence for a change
      is thin, see below) and every said label and tag put back to the letter;
    * the k best readings under the same constraints, with P(reading | words, constraints);
    * a **verdict**: the proposal is *plausible* unless the grammar found no tree at all under
      the constraints (its well-formed fallback stands in), or the best reading under the
      constraints is less probable than the unconstrained best by more than a factor of
      :data:`FAR_LESS` (the annotator's statements force the grammar far from anything it
      believes, so the rest of the tree is guesswork). The reasons are plain sentences.

Labels the grammar cannot build over a said span are reached through the relabel back-off
(:class:`parser.chart.Constraints`, probability :data:`RELABEL_BACKOFF`): any node over the span
stands in and takes the said label, so a pin never makes a sentence unparsable; the outcome
lists those spans (``stand_ins``). A label the grammar knows only without its function tag
(``NP-SBJ`` as ``NP``) is parsed as the plain one and relabelled; a tag the grammar has never
seen is left free in the parse and set afterwards.

Keeping the previous tree (the rule, in full): a re-parse may change a bracket or tag the
annotator has said nothing about only where the grammar, given everything said, prefers the
change by a margin. Each labelled bracket of the previous tree counts :data:`KEEP_BONUS` more in
the consensus objective (its posterior p is scored as p + KEEP_BONUS against the bracket cost);
each previous tag stays unless the tag of the best reading under the constraints has a
posterior higher by more than KEEP_BONUS. The value is a judgement (under half the bracket
cost), not tuned; ``bench/simulate_annotator.py`` measures what the loop saves with it. An
implausible proposal is never applied by itself: the caller shows it and keeps the previous
tree unless the annotator takes it.

Complexity: two chart parses (the constrained one with posteriors and k-best, and an
unconstrained Viterbi pass for the comparison, kept per sentence by :func:`free_best_logprob`
so that later re-parses of the sentence skip it), O(n^3 R) each, plus the O(n^3) consensus.
Limits: one sentence per call.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field

from nltk import Tree

from parser.chart import Constraints, parse
from parser.consensus import consensus_tree
from parser.grammar import Grammar
from parser.trees import constituents, pos_tags, strip_label, tree_from_spans, words

#: Probability of the relabel back-off: any node over a said span may stand in for the said
#: label at this factor (small enough that a real derivation of the label wins when one of
#: reasonable probability exists).
RELABEL_BACKOFF = 1e-5
#: Bonus of the previous tree's brackets and tags in the proposal (see the module docstring).
KEEP_BONUS = 0.15
#: Derivations drawn per reading asked for when the readings are made distinct (see
#: :func:`reparse`): many of the k best derivations differ from a better one only in a tag.
DISTINCT_POOL = 4
#: A best reading under the constraints less probable than the unconstrained best by more
#: than this factor makes the proposal implausible.
FAR_LESS = 1e-6


@dataclass(frozen=True)
class Said:
    """Everything the annotator has said about the sentence (spans 0-based, end exclusive).

    required: ``(start, end, label)`` brackets that must be in the result (pins, brackets
    they added, brackets they relabelled); forbidden: ``(start, end)`` spans that must not be
    brackets (brackets they removed); tags: ``(word index, tag)`` fixed POS tags (pins and
    corrections)."""

    required: tuple[tuple[int, int, str], ...] = ()
    forbidden: tuple[tuple[int, int], ...] = ()
    tags: tuple[tuple[int, str], ...] = ()


@dataclass
class Outcome:
    """The result of :func:`reparse` (see the module docstring)."""

    tree: Tree
    readings: list[tuple[Tree, float | None]]
    plausible: bool
    reasons: list[str]
    fallback: bool
    #: Said brackets whose label the grammar could not build there (a stand-in took it).
    stand_ins: list[tuple[int, int, str]] = field(default_factory=list)
    #: log10 of P(best reading under the constraints) / P(unconstrained best); None for a
    #: fallback.
    log10_ratio: float | None = None
    posteriors: list[tuple[str, int, int, float]] = field(default_factory=list)
    tag_posteriors: list[dict[str, float]] = field(default_factory=list)
    seconds: float = 0.0


def _known(label: str, known: Sequence[str] | frozenset[str]) -> str | None:
    if label in known:
        return label
    stripped = strip_label(label)
    return stripped if stripped in known else None


def constraints_for(
    g: Grammar, n: int, said: Said, backoff: float | None = RELABEL_BACKOFF
) -> Constraints:
    """The chart constraints of ``said`` for a sentence of ``n`` words (labels and tags the
    grammar lacks are left free, to be set afterwards by :func:`graft`)."""
    labels = frozenset(g.labels)
    tagset = frozenset(g.tags)
    tags: list[str | None] = [None] * n
    for i, tag in said.tags:
        tags[i] = _known(tag, tagset)
    return Constraints(
        required=[(s, e, _known(lab, labels)) for s, e, lab in said.required],
        forbidden=[(s, e) for s, e in said.forbidden if (s, e) != (0, n)],
        tags=tags if any(t is not None for t in tags) else [],
        relabel_backoff=backoff,
    )


def graft(tree: Tree, said: Said) -> Tree:
    """``tree`` with every said bracket present with its exact label and every said tag set.

    A said bracket missing by its label takes the place of the node over its span that nobody
    said anything about (the stand-in, or the plain label of ``NP-SBJ``); with no node there it
    is added (nothing crosses it: the parse kept the span free)."""
    items = constituents(tree)
    word_list = words(tree)
    tag_list = pos_tags(tree)
    for i, tag in said.tags:
        tag_list[i] = tag
    wanted = {(lab, s, e) for s, e, lab in said.required}
    for s, e, label in said.required:
        if (label, s, e) in items:
            continue
        free = [
            j
            for j, (lab, a, b) in enumerate(items)
            if (a, b) == (s, e) and j != 0 and (lab, a, b) not in wanted
        ]
        same = [j for j in free if strip_label(items[j][0]) == strip_label(label)]
        if same or free:
            items[(same or free)[0]] = (label, s, e)
            continue
        first = next((j for j, (_, a, b) in enumerate(items) if (a, b) == (s, e)), None)
        if first is None or first == 0:
            items.append((label, s, e))
        else:
            items.insert(first, (label, s, e))
    return tree_from_spans(word_list, tag_list, items, root=None)


def reparse(
    g: Grammar,
    word_list: Sequence[str],
    said: Said,
    previous: Tree | None = None,
    k: int = 5,
    keep_bonus: float = KEEP_BONUS,
    distinct: bool = False,
    own_tags: bool = False,
) -> Outcome:
    """Re-parse ``word_list`` around ``said``, favouring ``previous`` (see the module
    docstring). Raises :class:`parser.errors.ConstraintError` when the said brackets cross each
    other or a bracket is both required and forbidden.

    The readings are the k best derivations with their own tags. With ``distinct`` they are
    up to ``k`` different bracketings instead: each of the ``DISTINCT_POOL * k`` best
    derivations takes the proposal's tags (``own_tags``: keeps its own), and one that brackets
    the words as a better one did is dropped (its probability is that of its best derivation).
    The Bench asks for the k best derivations: ``bench/simulate_annotator.py`` measured no
    saving from distinct bracketings (DEVELOPERS.md)."""
    t0 = time.perf_counter()
    word_list = [str(w) for w in word_list]
    n = len(word_list)
    constraints = constraints_for(g, n, said)
    pool = k * DISTINCT_POOL if distinct else k
    result = parse(g, word_list, k=pool, posteriors=True, constraints=constraints)
    reasons: list[str] = []
    if result.fallback:
        tree = graft(result.trees[0], said)
        reasons.append(
            "The grammar found no tree that keeps everything you said; this is a "
            "stand-in that keeps it and nothing more."
        )
        return Outcome(
            tree=tree,
            readings=[(tree, None)],
            plausible=False,
            reasons=reasons,
            fallback=True,
            seconds=time.perf_counter() - t0,
        )
    free_best = free_best_logprob(g, word_list)
    log10_ratio = None
    if math.isfinite(free_best):
        log10_ratio = (result.logprobs[0] - free_best) / math.log(10)
    best = result.trees[0]
    have = set(constituents(best))
    stand_ins = [
        (s, e, lab)
        for s, e, lab in said.required
        if not any((x, s, e) in have for x in (lab, strip_label(lab)))
    ]
    fixed = dict(said.tags)
    prev_tags = pos_tags(previous) if previous is not None else None
    tags: list[str] = []
    for i, viterbi_tag in enumerate(pos_tags(best)):
        if i in fixed:
            tags.append(fixed[i])
            continue
        post = result.tag_posteriors[i] if i < len(result.tag_posteriors) else {}
        choice = viterbi_tag  # as the start's consensus tree has (parser.chart)
        if (
            prev_tags is not None
            and prev_tags[i] != choice
            and post.get(prev_tags[i], 0.0) + keep_bonus >= post.get(choice, 0.0)
        ):
            choice = prev_tags[i]
        tags.append(choice)
    prefer = (
        [(strip_label(lab), s, e) for lab, s, e in constituents(previous)[1:]]
        if previous is not None
        else []
    )
    proposal = consensus_tree(
        word_list,
        tags,
        result.posteriors,
        g.root_label,
        required=constraints.required,
        prefer=prefer,
        bonus=keep_bonus,
    )
    proposal = graft(proposal, said)
    inside = result.inside_logprob
    readings: list[tuple[Tree, float | None]] = []
    seen: set[tuple[tuple[str, int, int], ...]] = set()
    for t, lp in zip(result.trees, result.logprobs, strict=True):
        p = math.exp(min(0.0, lp - inside)) if inside is not None else None
        if not distinct:
            readings.append((graft(t, said), p))
            continue
        reading = graft(
            t if own_tags else tree_from_spans(word_list, tags, constituents(t), root=None), said
        )
        shape = tuple(constituents(reading))
        if shape in seen:
            continue
        seen.add(shape)
        readings.append((reading, p))
        if len(readings) == k:
            break
    if stand_ins:
        names = ", ".join(f"{lab} over words {s + 1}-{e}" for s, e, lab in stand_ins)
        reasons.append(
            f"The grammar never builds {names}; it kept the bracket as you labelled "
            "it and parsed the rest around it."
        )
    plausible = True
    if log10_ratio is not None and log10_ratio < math.log10(FAR_LESS):
        plausible = False
        reasons.append(
            f"Under what you said, the grammar's best reading is 10^{-log10_ratio:.0f}"
            " times less probable than its free best: the rest of the tree is "
            "little more than a guess."
        )
    return Outcome(
        tree=proposal,
        readings=readings,
        plausible=plausible,
        reasons=reasons,
        fallback=False,
        stand_ins=stand_ins,
        log10_ratio=log10_ratio,
        posteriors=result.posteriors,
        tag_posteriors=result.tag_posteriors,
        seconds=time.perf_counter() - t0,
    )


#: Sentences whose unconstrained best :func:`free_best_logprob` keeps per grammar.
FREE_BEST_CACHE = 256


def free_best_logprob(g: Grammar, word_list: Sequence[str]) -> float:
    """log P of the best derivation of ``word_list`` with nothing said (-inf without one).
    It does not change while the annotator edits, so each grammar object keeps it for the
    last :data:`FREE_BEST_CACHE` sentences: only a sentence's first re-parse pays for it."""
    cache: dict[tuple[str, ...], float] = g.__dict__.setdefault("_free_best", {})
    key = tuple(word_list)
    found = cache.get(key)
    if found is not None:
        return found
    free = parse(g, list(key), k=1)
    value = -math.inf if free.fallback else float(free.logprobs[0])
    if len(cache) >= FREE_BEST_CACHE:
        cache.clear()
    cache[key] = value
    return value


@dataclass
class Changes:
    """What a re-parse changes in a tree: labelled brackets added and removed (a relabel is
    one of each over the same span, listed in ``relabelled``), tags changed."""

    added: list[tuple[str, int, int]]
    removed: list[tuple[str, int, int]]
    relabelled: list[tuple[int, int, str, str]]
    retagged: list[tuple[int, str, str]]

    @property
    def count(self) -> int:
        return len(self.added) + len(self.removed) - len(self.relabelled) + len(self.retagged)


def changes(before: Tree, after: Tree) -> Changes:
    """The differences from ``before`` to ``after`` (same words), root excluded."""
    old = constituents(before)[1:]
    new = constituents(after)[1:]
    old_left = list(old)
    added = []
    for item in new:
        if item in old_left:
            old_left.remove(item)
        else:
            added.append(item)
    removed = old_left
    relabelled = []
    spare = list(removed)
    for lab, s, e in added:
        match = next((x for x in spare if x[1:] == (s, e)), None)
        if match is not None:
            spare.remove(match)
            relabelled.append((s, e, match[0], lab))
    retagged = [
        (i, a, b)
        for i, (a, b) in enumerate(zip(pos_tags(before), pos_tags(after), strict=True))
        if a != b
    ]
    return Changes(added=added, removed=removed, relabelled=relabelled, retagged=retagged)
