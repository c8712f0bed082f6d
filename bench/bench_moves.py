"""What the Bench's reattach and token fixes save: user actions to correct GUM sentences from
the grammar's suggestion to gold with the older moves alone versus with reattach and token
fixes, and the time from a move to the redrawn tree on a 60-word sentence.

Usage: python bench/bench_moves.py [--moves 15]

Data: the shared GUM trees (Zeldes 2017, CC BY; ../shared/data/gum-trees). The grammar is the
test suite's: trained on the first 40 GUM files (tests/app/bench_helpers.py). The five
sentences are the first ones of 12 to 25 words in the remaining files whose suggestion differs
from gold and that hold a clitic token (n't, 's, 're, 'm, 'll, 've, 'd): the sentence is
imported with that clitic written onto the word before it, as a whitespace tokenizer of the
running text would, so its tokens are wrong as well as its tree.

Actions (counted in headless Chromium with the Bench's own tree code, static/js/treemodel.js;
each plan is replayed to the end and must give exactly the gold tree):

* older moves: dissolve each bracket that gold lacks (relabel instead when gold has another
  label over the same words), add each missing bracket (smallest first), retag each wrong POS
  tag; one action each. A wrong token cannot be fixed with these: such a sentence is
  unreachable (it could only be held back).
* with reattach and token fixes: first the token fix (one action: split; the tag goes to both
  halves), then while one reattach lowers the bracket and tag difference to gold by two or
  more (what a dissolve plus an add would cost), the best such move (one action), then the
  older moves for the rest.

Navigation (choosing nodes, walking) is not counted in either; labels typed into a prompt are
part of their action.

Timing (a live server and the Bench page, 1440x900): a 60-word GUM sentence is opened with its
gold tree; a phrase with an order-keeping target is chosen and taken (m), its target chosen,
and the put-down key press is timed from the keydown to the new tree in the page (script and
DOM: a MutationObserver) and to the next animation frame (drawn); then undone. Medians.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))


from app.main import create_app  # noqa: E402
from app.models import ROLE_ANNOTATOR, User  # noqa: E402
from app.security import hash_password  # noqa: E402
from app.services import annotation as annotation_service  # noqa: E402
from app.services.suggestions import grammar_from_bytes  # noqa: E402
from app.settings import Settings  # noqa: E402
from parser.chart import parse  # noqa: E402
from parser.trees import read_trees, strip_function_tags, words, write_tree  # noqa: E402
from tests.app.bench_helpers import TRAIN_FILES, assign, gum_grammar_bytes, make_corpus  # noqa: E402
from tests.app.live_server import LiveServer  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"
CHROMIUM = "/usr/bin/chromium"
PASSWORD = "bench-pass-123"
CLITICS = {"n't", "'s", "'re", "'m", "'ll", "'ve", "'d"}

PLAN_JS = """
({start, gold, split}) => {
  const same = (a, b) => T.writeTree(a) === T.writeTree(b);
  const key = (s) => `${s.label} ${s.start} ${s.end}`;
  // the older moves: dissolve or relabel, add, retag
  function finish(tree, gold) {
    let t = tree, n = 0;
    for (;;) {
      const spans = T.spansOf(t), want = T.spansOf(gold), wk = new Set(want.map(key));
      const have = new Set(spans.map(key));
      const k = spans.findIndex((s, i) => i > 0 && !wk.has(key(s)));
      if (k < 0) break;
      const s = spans[k];
      const other = want.find((g, i) => i > 0 && g.start === s.start && g.end === s.end &&
                                        !have.has(key(g)));
      t = other ? T.relabel(t, k, other.label) : T.removeConstituent(t, k);
      n++;
    }
    const root = T.spansOf(gold)[0].label;
    if (T.spansOf(t)[0].label !== root) { t = T.relabel(t, 0, root); n++; }
    const have = new Set(T.spansOf(t).map(key));
    // smallest first; over the same words the lower one first (later in gold's pre-order)
    const missing = T.spansOf(gold).map((g, i) => ({...g, i})).filter((g) => !have.has(key(g)))
      .sort((a, b) => (a.end - a.start) - (b.end - b.start) || b.i - a.i);
    for (const g of missing) { t = T.addConstituent(t, g.start, g.end, g.label).tree; n++; }
    const gt = T.tagsOf(gold);
    T.tagsOf(t).forEach((tag, i) => { if (tag !== gt[i]) { t = T.setTag(t, i, gt[i]); n++; } });
    return {tree: t, actions: n};
  }
  function splitToken(tree, p, pieces) {
    const w = T.wordsOf(tree), tags = T.tagsOf(tree);
    const spans = T.spansOf(tree).map((s) => ({label: s.label,
      start: s.start > p ? s.start + 1 : s.start, end: s.end > p ? s.end + 1 : s.end}));
    w.splice(p, 1, ...pieces);
    tags.splice(p, 1, tags[p], tags[p]);
    return T.treeFromSpans(w, tags, spans);
  }
  const g = T.readTree(gold);
  let s = T.readTree(start);
  const out = {};
  if (split) out.old = {reachable: false};
  else {
    const r = finish(s, g);
    out.old = {reachable: same(r.tree, g), actions: r.actions};
  }
  let n = 0, moves = 0, fixes = 0;
  if (split) { s = splitToken(s, split.position, split.pieces); n++; fixes++; }
  for (;;) {
    const d0 = T.bracketDifference(s, g);
    let best = null;
    const refs = [...T.spansOf(s).map((_, k) => ({kind: "phrase", index: k})).slice(1),
                  ...T.wordsOf(s).map((_, i) => ({kind: "tag", index: i}))];
    for (const ref of refs) {
      for (const target of T.reattachTargets(s, ref)) {
        const t = T.reattach(s, ref, target).tree;
        const d = T.bracketDifference(t, g);
        if (!best || d < best.d) best = {d, t};
      }
    }
    if (!best || d0 - best.d < 2) break;
    s = best.t; n++; moves++;
  }
  const r = finish(s, g);
  out.new = {reachable: same(r.tree, g), actions: n + r.actions, moves, fixes};
  return out;
}
"""


def pick_sentences(grammar, files):
    """(gold tree, imported tokens, suggestion text, split) as described above, in file
    order."""
    for path in files:
        for gold in read_trees(path.read_text("utf-8")):
            gold = strip_function_tags(gold)
            toks = words(gold)
            if not 12 <= len(toks) <= 25:
                continue
            at = next((i for i in range(1, len(toks)) if toks[i] in CLITICS), None)
            if at is None:
                continue
            imported = [*toks[: at - 1], toks[at - 1] + toks[at], *toks[at + 1 :]]
            result = parse(grammar, imported, posteriors=True)
            tree = result.consensus if result.consensus is not None else result.trees[0]
            yield (
                gold,
                imported,
                write_tree(tree),
                {"position": at - 1, "pieces": [toks[at - 1], toks[at]]},
            )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--moves", type=int, default=15)
    args = ap.parse_args()
    files = sorted(GUM.glob("*.ptb"))
    if not files:
        sys.exit(f"no GUM trees at {GUM}")
    grammar = grammar_from_bytes(gum_grammar_bytes())
    sentences = pick_sentences(grammar, files[TRAIN_FILES:])
    sixty = next(
        strip_function_tags(t)
        for f in files
        for t in read_trees(f.read_text("utf-8"))
        if len(words(t)) == 60
    )
    from playwright.sync_api import sync_playwright

    with tempfile.TemporaryDirectory(prefix="tw-bench-moves-") as tmp:
        settings = Settings(data_dir=Path(tmp), secret_key="bench", login_delay_seconds=0.05)
        app = create_app(settings)
        with app.state.sessionmaker() as db:
            user = User(
                username="bench",
                display_name="Bench Annotator",
                role=ROLE_ANNOTATOR,
                password_hash=hash_password(PASSWORD),
            )
            db.add(user)
            db.commit()
            _corpus, rows = make_corpus(
                db, [" ".join(words(sixty))], name="GUM long", labels=[], tags=[]
            )
            assign(db, rows, user)
            sentence = rows[0]
            annotation_service.save_revision(
                db, user, sentence, base=0, tree_text=write_tree(sixty), source="text"
            )
            sid = sentence.id
        with LiveServer(settings, log=Path(tmp) / "server.log") as server, sync_playwright() as pw:
            browser = pw.chromium.launch(
                executable_path=CHROMIUM,
                headless=True,
                args=[
                    "--headless",
                    "--no-sandbox",
                    "--disable-gpu",
                    "--disable-background-networking",
                    "--disable-component-update",
                    "--no-first-run",
                ],
            )
            page = browser.new_page(viewport={"width": 1440, "height": 900})

            # ---- actions, old moves against reattach and token fixes
            page.goto(f"{server.url}/static/css/bench.css")
            page.evaluate("async () => { window.T = await import('/static/js/treemodel.js'); }")
            print(
                f"{'sentence':<46} {'words':>5} {'old moves':>10} {'with reattach':>14} "
                f"{'(moves, token fixes)':>21}"
            )
            olds, news, olds_tree_only = [], [], []
            left_out = 0
            for gold, imported, start, split in sentences:
                if len(news) == 5:
                    break
                res = page.evaluate(
                    PLAN_JS, {"start": start, "gold": write_tree(gold), "split": split}
                )
                text = " ".join(imported)
                label = (text[:43] + "...") if len(text) > 46 else text
                old = res["old"]
                new = res["new"]
                # the same sentence with its tokens right from the start: tree moves alone
                right = parse(grammar, words(gold), posteriors=True)
                rtree = right.consensus if right.consensus is not None else right.trees[0]
                both = page.evaluate(
                    PLAN_JS, {"start": write_tree(rtree), "gold": write_tree(gold), "split": None}
                )
                if not (new["reachable"] and both["old"]["reachable"] and both["new"]["reachable"]):
                    left_out += 1  # a plan fell short of gold (see the report): not counted
                    continue
                news.append(new["actions"])
                print(
                    f"{label:<46} {len(words(gold)):>5} "
                    f"{'unreachable' if not old['reachable'] else old['actions']:>10} "
                    f"{new['actions']:>14} {str((new['moves'], new['fixes'])):>21}"
                )
                olds_tree_only.append((both["old"]["actions"], both["new"]["actions"]))
                olds.append(old)
            print(f"sentences left out because a plan did not end exactly on gold: {left_out}")
            print(
                f"old moves reach gold in {sum(o['reachable'] for o in olds)} of "
                f"{len(olds)} sentences (the others need a token fix); with reattach and "
                f"token fixes in {len(news)} of {len(news)}, median "
                f"{statistics.median(news):.0f} actions, total {sum(news)}"
            )
            o_t = [a for a, _ in olds_tree_only]
            n_t = [b for _, b in olds_tree_only]
            print(
                f"the same five with correct tokens from the start (tree edits only): old "
                f"moves median {statistics.median(o_t):.0f} (total {sum(o_t)}), with reattach "
                f"median {statistics.median(n_t):.0f} (total {sum(n_t)}), ratio "
                f"{sum(n_t) / sum(o_t):.2f}"
            )

            # ---- time from a move to the redrawn tree, 60 words
            page.goto(f"{server.url}/login")
            page.fill("input[name=username]", "bench")
            page.fill("input[name=password]", PASSWORD)
            page.click("button[type=submit]")
            page.wait_for_load_state("load")
            page.goto(f"{server.url}/bench/{sid}")
            page.wait_for_selector("#bench[data-ready='1']")
            page.keyboard.press("0")
            pick = page.evaluate("""async () => {
                const T = await import('/static/js/treemodel.js');
                const t = T.readTree(document.querySelector('#tree-pane svg').dataset.tree);
                const spans = T.spansOf(t);
                for (let k = spans.length - 1; k > 0; k--) {
                    const targets = T.reattachTargets(t, {kind: 'phrase', index: k});
                    if (targets.length) return [k, targets[0]];
                }
                return null;
            }""")
            if pick is None:
                sys.exit("no movable phrase in the 60-word tree")
            page.evaluate("""() => {
                window.__moveTimes = [];
                document.addEventListener('keydown', (ev) => {
                    if (ev.key !== 'm' || !window.__armed) return;
                    window.__armed = false;
                    const t0 = performance.now();
                    const pane = document.getElementById('tree-pane');
                    const obs = new MutationObserver(() => {
                        obs.disconnect();
                        const t1 = performance.now();
                        requestAnimationFrame(() => window.__moveTimes.push(
                            [t1 - t0, performance.now() - t0]));
                    });
                    obs.observe(pane, {childList: true});
                }, {capture: true});
            }""")
            node, target = pick
            for _ in range(args.moves):
                page.evaluate(
                    "i => document.querySelector(`#tree-pane g.tw-phrase"
                    "[data-index='${i}']`).dispatchEvent(new MouseEvent('click', "
                    "{bubbles: true}))",
                    node,
                )
                page.keyboard.press("m")
                page.evaluate(
                    "i => document.querySelector(`#tree-pane g.tw-phrase"
                    "[data-index='${i}']`).dispatchEvent(new MouseEvent('click', "
                    "{bubbles: true}))",
                    target,
                )
                page.evaluate("() => { window.__armed = true; }")
                before = page.get_attribute("#tree-pane svg", "data-tree")
                done = page.evaluate("() => window.__moveTimes.length")
                page.keyboard.press("m")
                page.wait_for_function("n => window.__moveTimes.length > n", arg=done)
                assert page.get_attribute("#tree-pane svg", "data-tree") != before
                page.keyboard.press("u")
                page.wait_for_function(
                    "t => document.querySelector('#tree-pane svg').dataset.tree === t", arg=before
                )
                time.sleep(0.05)
            times = page.evaluate("() => window.__moveTimes")
            script = [a for a, _ in times]
            frame = [b for _, b in times]
            print(
                f"move to redrawn tree, 60 words ({len(times)} moves): median "
                f"{statistics.median(script):.1f} ms to the new tree in the page, "
                f"{statistics.median(frame):.1f} ms to the next frame (target < 50 ms); "
                f"load average {os.getloadavg()[0]:.2f}"
            )
            browser.close()


if __name__ == "__main__":
    main()
