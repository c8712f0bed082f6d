"""static/js/treemodel.js checked in Chromium against the server's tree code (parser.trees):
the same one-line text for GUM trees (Zeldes 2017, CC BY), the same line and column for
malformed text, and edits that equal the Python rebuild from spans."""

from __future__ import annotations

import json

import pytest

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
    got = js.evaluate("""texts => texts.map(t => {
        try { T.readTree(t); return null; }
        catch (e) { return e instanceof T.BracketError ? [e.line, e.column] : String(e); }
    })""", MALFORMED)
    for text, where in zip(MALFORMED, got, strict=True):
        with pytest.raises(BracketSyntaxError) as err:
            read_tree(text)
        assert where == [err.value.line, err.value.column], text


def test_bench_js_edits_equal_the_python_rebuild(js, rng) -> None:
    trees = [t for t in read_trees(gum_files()[7].read_text("utf-8"))
             if len(constituents(t)) > 3][:60]
    cases = []
    for tree in trees:
        spans = constituents(tree)
        k = rng.randrange(1, len(spans))
        kept = spans[:k] + spans[k + 1:]
        removed = tree_from_spans(words(tree), pos_tags(tree), kept, root=None)
        label, s, e = spans[k]
        relabelled = tree_from_spans(words(tree), pos_tags(tree),
                                     spans[:k] + [("ZZ", s, e)] + spans[k + 1:], root=None)
        cases.append({"text": write_tree(tree), "k": k, "removed": write_tree(removed),
                      "relabelled": write_tree(relabelled)})
    results = js.evaluate("""cases => cases.map(c => {
        const t = T.readTree(c.text);
        return [T.writeTree(T.removeConstituent(t, c.k)), T.writeTree(T.relabel(t, c.k, "ZZ")),
                T.writeTree(t)];
    })""", cases)
    for case, (removed, relabelled, untouched) in zip(cases, results, strict=True):
        assert removed == case["removed"]
        assert relabelled == case["relabelled"]
        assert untouched == case["text"]  # edits never change their input


def test_bench_js_add_and_move_edges(js) -> None:
    text = "(ROOT (S (NP (DT the) (NN dog)) (VP (VBD saw) (NP (DT a) (NN cat))) (. .)))"
    out = js.evaluate("""text => {
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
    }""", text)
    assert out["addInner"].startswith("Edit") and "already NP" in out["addInner"]
    assert out["addSame"].startswith("EditError") and "already VP" in out["addSame"]
    assert out["addAbove"] == ("(ROOT (S (NP (DT the) (NN dog)) (S (VP (VBD saw) (NP (DT a) "
                               "(NN cat)))) (. .)))")
    assert out["addCross"].startswith("EditError") and "cross" in out["addCross"]
    assert out["addWhole"] == ("(ROOT (FRAG (S (NP (DT the) (NN dog)) (VP (VBD saw) (NP (DT a) "
                               "(NN cat))) (. .))))")
    assert out["addWord"] == ("(ROOT (S (NP (DT the) (NN dog)) (VP (VP (VBD saw)) (NP (DT a) "
                              "(NN cat))) (. .)))")
    assert out["growRight"] == ("(ROOT (S (NP (DT the) (NN dog)) (VP (VBD saw) (NP (DT a) "
                                "(NN cat)) (. .))))")
    assert out["shrinkLeft"] == ("(ROOT (S (NP (DT the) (NN dog)) (VBD saw) (VP (NP (DT a) "
                                 "(NN cat))) (. .)))")
    assert out["growPastParent"].startswith("EditError") and "cross" in out["growPastParent"]
    assert out["crossSibling"].startswith("EditError") and "VP" in out["crossSibling"]
    assert out["tag"] == ("(ROOT (S (NP (DT the) (NNS dog)) (VP (VBD saw) (NP (DT a) "
                          "(NN cat))) (. .)))")
    assert out["badLabel"].startswith("EditError")


def test_bench_js_escapes_bracket_words_like_the_server(js) -> None:
    tree = read_tree("(ROOT (S (NN f-LRB-x-RRB-) (-LRB- -LRB-)))")
    built = js.evaluate("""() => T.writeTree({label: "ROOT", children: [{label: "S", children: [
        {label: "NN", word: "f(x)"}, {label: "-LRB-", word: "("}]}]})""")
    assert built == write_tree(tree)
    assert json.loads(json.dumps(built)) == "(ROOT (S (NN f-LRB-x-RRB-) (-LRB- -LRB-)))"
