"""External check: our scores on GUM trees (Zeldes 2017, CC BY) against perturbed copies equal a
separate, plain re-computation of the PARSEVAL definitions (Black et al. 1991) written on NLTK's
tree-position utilities (``Tree.treepositions``), with greedy list matching."""

from __future__ import annotations

import random
import re

import pytest
from nltk import Tree

from parser.scoring import ScoringOptions, score_corpus, score_pair
from parser.trees import read_trees
from tests.shared_data import gum_files

pytestmark = pytest.mark.external

PUNCT = {",", ".", ":", "``", "''", "-NONE-", "HYPH", "NFP"}
LABELS = ["NP", "VP", "PP", "S", "ADVP", "ADJP", "SBAR", "PRN"]


def plain_label(label: str) -> str:
    return label if label.startswith("-") else re.split(r"[-=]", label)[0]


def reference_brackets(tree: Tree, gold_tags: list[str], delete: set[str]) -> list:
    keep = [tag not in delete for tag in gold_tags]
    leaves = tree.treepositions("leaves")
    out = []
    for pos in tree.treepositions():
        node = tree[pos]
        if not isinstance(node, Tree) or node.height() <= 2:  # a word or a preterminal
            continue
        if pos == () and node.label() in ("", "ROOT", "TOP"):
            continue
        covered = [i for i, leaf in enumerate(leaves) if leaf[: len(pos)] == pos]
        new_index = [sum(keep[:i]) for i in covered if keep[i]]
        if new_index:
            out.append((plain_label(node.label()), new_index[0], new_index[-1] + 1))
    return out


def reference_score(gold: Tree, test: Tree, delete: set[str]) -> tuple[int, int, int, int]:
    tags = [tag for _, tag in gold.pos()]
    g = reference_brackets(gold, tags, delete)
    t = reference_brackets(test, tags, delete)
    remaining = list(g)
    matched = 0
    for bracket in t:
        if bracket in remaining:
            remaining.remove(bracket)
            matched += 1
    crossing = sum(1 for _, a, b in t if any(c < a < d < b or a < c < b < d for _, c, d in g))
    return matched, len(g), len(t), crossing


def perturb(tree: Tree, rng: random.Random, top: bool = True) -> Tree:
    """Relabel, flatten and regroup phrasal nodes at random; words and tags stay."""
    if isinstance(tree[0], str):
        return Tree(tree.label(), list(tree))
    kids: list[Tree] = []
    for child in tree:
        new = perturb(child, rng, top=False)
        if not isinstance(new[0], str) and rng.random() < 0.15:
            kids.extend(new)  # flatten: the child's children join this node
        else:
            kids.append(new)
    if len(kids) > 2 and rng.random() < 0.2:
        i = rng.randrange(len(kids) - 1)
        kids[i : i + 2] = [Tree(rng.choice(LABELS), kids[i : i + 2])]
    label = tree.label()
    if not top and rng.random() < 0.15:
        label = rng.choice(LABELS)
    return Tree(label, kids)


@pytest.fixture(scope="module")
def gum_sample() -> list[tuple[Tree, Tree]]:
    rng = random.Random(20240917)
    pairs = []
    for path in gum_files()[::10]:
        trees = read_trees(path.read_text(encoding="utf-8"))
        for gold in trees[:30]:
            pairs.append((gold, perturb(gold, rng)))
    return pairs


@pytest.mark.parametrize("delete", [PUNCT, set()], ids=["punct-deleted", "punct-kept"])
def test_gum_perturbed_scores_equal_plain_recomputation(gum_sample, delete):
    options = ScoringOptions(delete_pos=frozenset(delete))
    totals = [0, 0, 0]
    imperfect = 0
    for gold, test in gum_sample:
        s = score_pair(gold, test, options)
        matched, n_gold, n_test, crossing = reference_score(gold, test, delete)
        assert (s.matched, s.gold_count, s.test_count, s.crossing) == (
            matched,
            n_gold,
            n_test,
            crossing,
        )
        totals = [totals[0] + matched, totals[1] + n_gold, totals[2] + n_test]
        imperfect += not s.exact
    assert imperfect > len(gum_sample) // 4  # the perturbation did change many trees
    corpus = score_corpus(gum_sample, options)
    assert corpus.precision == pytest.approx(totals[0] / totals[2])
    assert corpus.recall == pytest.approx(totals[0] / totals[1])
