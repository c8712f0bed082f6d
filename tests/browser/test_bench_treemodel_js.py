"""static/js/treemodel.js checked in Chromium against the server's tree code (parser.trees):
the same one-line text for GUM trees (Zeldes 2017, CC BY), the same line and column for
malformed text, and edits that equal the Python rebuild from spans."""

from __future__ import annotations

import json

import pytest
from nltk import Tree

from parser.errors import BracketSyntaxError
from parser.trees import (
    constituents,
    pos_tags,
    read_tree,
    read_trees,
    tree_from_spans,
    words,
    write_tree,
)
from tests.shared_data import gum_files

MALFORMED = [
    "(ROOT (S (NN a))",
    "(ROOT (S (NN a))))",
    ")",
    "(ROOT (S ( (NN a))))",
    "( )",
    "(ROOT (NP ))",
    "(ROOT (NP dog (NN cat)))",
    "(ROOT (NN cat dog))",
    "word (ROOT (NN a))",
    "(ROOT (NN a)) (ROOT (NN b))",
    "(ROOT\n  (S\n    (NP (DT the) (NN dog))\n    (VP (VBD ran)))\n  extra)",
    "(ROOT\n  (S\n    (NP (DT the) (NN dog)))\n",
    "",
    "   \n  ",
]


@pytest.fixture
def js(browser_page, static_server):
    page = browser_page
    page.goto(f"{static_server}/css/bench.css")  # any file: the module must share its origin
    page.evaluate("async () => { window.T = await import('/js/treemodel.js'); }")
    return page


def test_bench_js_writer_matches_server_on_gum_trees(js) -> None:
    texts = []
    for path in gum_files()[:15]:
        texts.extend(write_tree(t, indent=True) for t in read_trees(path.read_text("utf-8")))
    texts = texts[:400]
    got = js.evaluate("texts => texts.map(t => T.writeTree(T.readTree(t)))", texts)
    want = [write_tree(read_tree(t)) for t in texts]
    assert len(got) == len(texts) >= 300
    assert got == want


def test_bench_js_reader_locates_errors_like_the_server(js) -> None:
    got = js.evaluate(
        """texts => texts.map(t => {
        try { T.readTree(t); return null; }
        catch (e) { return e instanceof T.BracketError ? [e.line, e.column] : String(e); }
    })""",
        MALFORMED,
    )
    for text, where in zip(MALFORMED, got, strict=True):
        with pytest.raises(BracketSyntaxError) as err:
            read_tree(text)
        assert where == [err.value.line, err.value.column], text


def test_bench_js_edits_equal_the_python_rebuild(js, rng) -> None:
    trees = [t for t in read_trees(gum_files()[7].read_text("utf-8")) if len(constituents(t)) > 3][
        :60
    ]
    cases = []
    for tree in trees:
        spans = constituents(tree)
        k = rng.randrange(1, len(spans))
        kept = spans[:k] + spans[k + 1 :]
        removed = tree_from_spans(words(tree), pos_tags(tree), kept, root=None)
        label, s, e = spans[k]
        relabelled = tree_from_spans(
            words(tree), pos_tags(tree), spans[:k] + [("ZZ", s, e)] + spans[k + 1 :], root=None
        )
        cases.append(
            {
                "text": write_tree(tree),
                "k": k,
                "removed": write_tree(removed),
                "relabelled": write_tree(relabelled),
            }
        )
    results = js.evaluate(
        """cases => cases.map(c => {
        const t = T.readTree(c.text);
        return [T.writeTree(T.removeConstituent(t, c.k)), T.writeTree(T.relabel(t, c.k, "ZZ")),
                T.writeTree(t)];
    })""",
        cases,
    )
    for case, (removed, relabelled, untouched) in zip(cases, results, strict=True):
        assert removed == case["removed"]
        assert relabelled == case["relabelled"]
        assert untouched == case["text"]  # edits never change their input


def test_bench_js_add_and_move_edges(js) -> None:
    text = "(ROOT (S (NP (DT the) (NN dog)) (VP (VBD saw) (NP (DT a) (NN cat))) (. .)))"
    out = js.evaluate(
        """text => {
        const t = T.readTree(text);
        const attempt = (f) => { try { return T.writeTree(f().tree || f()); }
                                 catch (e) { return e.name + ": " + e.message; } };
        return {
            addInner: attempt(() => T.addConstituent(t, 3, 5, "NP")),
            addSame: attempt(() => T.addConstituent(t, 2, 5, "VP")),
            addAbove: attempt(() => T.addConstituent(t, 2, 5, "S")),
            addCross: attempt(() => T.addConstituent(t, 1, 3, "XP")),
            addWhole: attempt(() => T.addConstituent(t, 0, 6, "FRAG")),
            addWord: attempt(() => T.addConstituent(t, 2, 3, "VP")),
            growRight: attempt(() => T.moveEdge(t, 3, "end", 1)),
            shrinkLeft: attempt(() => T.moveEdge(t, 3, "start", 1)),
            growPastParent: attempt(() => T.moveEdge(t, 4, "end", 1)),
            crossSibling: attempt(() => T.moveEdge(t, 2, "end", 1)),
            tag: attempt(() => T.setTag(t, 1, "NNS")),
            badLabel: attempt(() => T.relabel(t, 2, "N P")),
        };
    }""",
        text,
    )
    assert out["addInner"].startswith("Edit") and "already NP" in out["addInner"]
    assert out["addSame"].startswith("EditError") and "already VP" in out["addSame"]
    assert out["addAbove"] == (
        "(ROOT (S (NP (DT the) (NN dog)) (S (VP (VBD saw) (NP (DT a) (NN cat)))) (. .)))"
    )
    assert out["addCross"].startswith("EditError") and "cross" in out["addCross"]
    assert out["addWhole"] == (
        "(ROOT (FRAG (S (NP (DT the) (NN dog)) (VP (VBD saw) (NP (DT a) (NN cat))) (. .))))"
    )
    assert out["addWord"] == (
        "(ROOT (S (NP (DT the) (NN dog)) (VP (VP (VBD saw)) (NP (DT a) (NN cat))) (. .)))"
    )
    assert out["growRight"] == (
        "(ROOT (S (NP (DT the) (NN dog)) (VP (VBD saw) (NP (DT a) (NN cat)) (. .))))"
    )
    assert out["shrinkLeft"] == (
        "(ROOT (S (NP (DT the) (NN dog)) (VBD saw) (VP (NP (DT a) (NN cat))) (. .)))"
    )
    assert out["growPastParent"].startswith("EditError") and "cross" in out["growPastParent"]
    assert out["crossSibling"].startswith("EditError") and "VP" in out["crossSibling"]
    assert out["tag"] == (
        "(ROOT (S (NP (DT the) (NNS dog)) (VP (VBD saw) (NP (DT a) (NN cat))) (. .)))"
    )
    assert out["badLabel"].startswith("EditError")


def test_bench_js_escapes_bracket_words_like_the_server(js) -> None:
    tree = read_tree("(ROOT (S (NN f-LRB-x-RRB-) (-LRB- -LRB-)))")
    built = js.evaluate("""() => T.writeTree({label: "ROOT", children: [{label: "S", children: [
        {label: "NN", word: "f(x)"}, {label: "-LRB-", word: "("}]}]})""")
    assert built == write_tree(tree)
    assert json.loads(json.dumps(built)) == "(ROOT (S (NN f-LRB-x-RRB-) (-LRB- -LRB-)))"


def _brute_force_moves(tree, moved: int) -> dict[int, str]:
    """Every phrase the phrase number ``moved`` (pre-order) can go under with the words kept in
    order, found by trying every child position of every phrase (common practice, no source):
    target index -> the resulting tree's text. A move that leaves a phrase empty is not one."""

    def build(node, out):
        me = [node.label(), []]
        out.append(me)
        for child in node:
            if isinstance(child, Tree) and len(child) == 1 and isinstance(child[0], str):
                me[1].append(("tag", child.label(), child[0]))
            else:
                me[1].append(build(child, out))
        return me

    def leaves(node):
        if isinstance(node, tuple):
            yield node
        else:
            for c in node[1]:
                yield from leaves(c)

    def text(node):
        if isinstance(node, tuple):
            return f"({node[1]} {node[2]})"
        return f"({node[0]} {' '.join(text(c) for c in node[1])})"

    def empty(node):
        return not isinstance(node, tuple) and (not node[1] or any(empty(c) for c in node[1]))

    found: dict[int, str] = {}
    base = write_tree(tree)
    phrases_before: list = []
    build(tree, phrases_before)
    n_phrases = len(phrases_before)
    for target in range(n_phrases):
        fresh = read_tree(base)
        phrases: list = []
        root = build(fresh, phrases)
        order = [id(x) for x in leaves(root)]
        node = phrases[moved]
        parent = next(p for p in phrases if any(c is node for c in p[1]))
        goal = phrases[target]
        inside = [id(x) for x in phrases_in(node)]
        if goal is parent or id(goal) in inside:
            continue
        parent[1] = [c for c in parent[1] if c is not node]
        if empty(root):
            continue
        for at in range(len(goal[1]) + 1):
            goal[1].insert(at, node)
            if [id(x) for x in leaves(root)] == order:
                found[target] = text(root)
                break
            goal[1].pop(at)
    return found


def phrases_in(node):
    if isinstance(node, tuple):
        return
    yield node
    for c in node[1]:
        yield from phrases_in(c)


def test_bench_js_reattach_offers_exactly_the_order_keeping_moves(js, rng) -> None:
    """On GUM trees, the moves the Bench offers for a phrase are exactly those an exhaustive
    search finds, and each gives the same tree."""
    trees = [
        t for t in read_trees(gum_files()[3].read_text("utf-8")) if 4 < len(constituents(t)) < 40
    ][:40]
    cases = []
    for tree in trees:
        k = rng.randrange(1, len(constituents(tree)))
        cases.append(
            {
                "text": write_tree(tree),
                "k": k,
                "want": {str(t): v for t, v in _brute_force_moves(tree, k).items()},
            }
        )
    got = js.evaluate(
        """cases => cases.map(c => {
        const t = T.readTree(c.text);
        const ref = {kind: "phrase", index: c.k};
        const out = {};
        for (const target of T.reattachTargets(t, ref)) {
            const r = T.reattach(t, ref, target);
            const moved = T.spansOf(r.tree)[r.ref.index];
            const before = T.spansOf(t)[c.k];
            if (moved.start !== before.start || moved.end !== before.end) return "lost the node";
            out[String(target)] = T.writeTree(r.tree);
        }
        return out;
    })""",
        cases,
    )
    offered = 0
    for case, moves in zip(cases, got, strict=True):
        assert moves == case["want"], case["text"]
        offered += len(moves)
    assert offered >= 20  # the sample really exercises moves


def test_bench_js_reattach_refusals_say_why(js) -> None:
    text = (
        "(ROOT (S (NP (PRP I)) (VP (VBD saw) (NP (DT the) (NN man)) (PP (IN with) "
        "(NP (DT a) (NN scope)))) (. .)))"
    )
    out = js.evaluate(
        """text => {
        const t = T.readTree(text);
        const pp = T.spansOf(t).findIndex(s => s.label === "PP");
        const np = T.spansOf(t).findIndex(s => s.label === "NP" && s.start === 2);
        const subj = T.spansOf(t).findIndex(s => s.label === "NP" && s.start === 0);
        const tryIt = (ref, target, pinned) => {
            try { return T.writeTree(T.reattach(t, ref, target, pinned).tree); }
            catch (e) { return e.name + ": " + e.message; }
        };
        return {
            middle: tryIt({kind: "phrase", index: pp}, 0),
            far: tryIt({kind: "phrase", index: pp}, subj),
            pinned: tryIt({kind: "phrase", index: pp}, np, s => s.label === "NP" && s.start === 2),
            ok: tryIt({kind: "phrase", index: pp}, np),
            word: tryIt({kind: "tag", index: 7}, 0),
        };
    }""",
        text,
    )
    assert out["middle"].startswith("EditError") and "order of the words" in out["middle"]
    assert out["far"].startswith("EditError") and "does not reach" in out["far"]
    assert out["pinned"].startswith("EditError") and "pinned" in out["pinned"]
    assert out["ok"] == (
        "(ROOT (S (NP (PRP I)) (VP (VBD saw) (NP (DT the) (NN man) (PP (IN with) "
        "(NP (DT a) (NN scope))))) (. .)))"
    )
    assert out["word"] == (
        "(ROOT (S (NP (PRP I)) (VP (VBD saw) (NP (DT the) (NN man)) (PP (IN "
        "with) (NP (DT a) (NN scope))))) (. .))"
    )


def test_bench_js_graft_inside_takes_the_reading_inside_the_node_only(js, rng) -> None:
    """graftInside (the Bench's Take inside) against the rule written here from spans: the
    reading's brackets strictly inside the node's words and those words' tags, the tree's
    everywhere else; the node itself stays. Readings: GUM trees with brackets dropped and tags
    changed at random."""
    trees = [t for t in read_trees(gum_files()[3].read_text("utf-8")) if len(constituents(t)) > 4]
    cases, wants = [], []
    for tree in trees[:60]:
        spans = constituents(tree)
        tags = pos_tags(tree)
        kept = [spans[0]] + [b for b in spans[1:] if rng.random() < 0.6]
        their_tags = [t if rng.random() < 0.7 else "ZZ" for t in tags]
        reading = tree_from_spans(words(tree), their_tags, kept, root=None)
        k = rng.randrange(1, len(spans))
        _, s, e = spans[k]
        items = [b for b in spans[1:] if not (s <= b[1] and b[2] <= e) or b[1:] == (s, e)]
        items += [b for b in kept[1:] if s <= b[1] and b[2] <= e and b[1:] != (s, e)]
        want_tags = tags[:s] + their_tags[s:e] + tags[e:]
        wants.append((sorted(items), want_tags))
        cases.append({"text": write_tree(tree), "reading": write_tree(reading), "k": k})
    got = js.evaluate(
        """cases => cases.map(c => T.writeTree(
            T.graftInside(T.readTree(c.text), T.readTree(c.reading), c.k)))""",
        cases,
    )
    assert len(got) == len(cases) >= 30
    changed = 0
    for text, want, case in zip(got, wants, cases, strict=True):
        t = read_tree(text)
        assert (sorted(constituents(t)[1:]), pos_tags(t)) == want
        changed += text != case["text"]
    assert changed > len(cases) // 3  # the cases do change something inside the node
    with pytest.raises(Exception, match="other words"):
        js.evaluate(
            "() => T.graftInside(T.readTree('(ROOT (S (NN a) (NN b)))'), "
            "T.readTree('(ROOT (S (NN a) (NN c)))'), 1)"
        )
