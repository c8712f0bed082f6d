"""How long an annotator waits on the Bench: page to drawn suggestion, save, re-parse.

Usage: python bench/bench_page.py [--loads 20] [--saves 50] [--scale 20000]

Trains a grammar on the shared GUM trees (Zeldes 2017, CC BY; ../shared/data/gum-trees), all
of them but the held-out 30-word test sentences (the first ones in file order). A fresh
SQLite database gets one annotator, a corpus of those sentences and the grammar; a real server
(uvicorn subprocess on loopback) and headless Chromium (/usr/bin/chromium) do the rest:

* page to suggestion: the time from the start of navigation to the moment bench.js has drawn
  the tree (its ``bench-drawn`` performance mark), for ``--loads`` different 30-word sentences:
  opened cold (nothing cached: the first opening parses completely and fixes the sentence's
  start), the same sentences opened again (the same start, read from the Suggestion table),
  and ``--loads`` other sentences whose suggestions were cached beforehand (what the
  look-ahead refresh does after a grammar becomes active);

``--scale N`` uses instead the N-sentence corpus of bench/scale.py's generator (GUM words cut
into sentences of 5-40, GUM gold, pairs; its annotator ``reader`` has all N sentences in the
queue), with the grammar trained on every GUM tree; the 30-word sentences are picked from the
reader's queue, and the re-parse pins come from the tree the page drew (no gold for them).
* save round trip: ``fetch`` of POST /api/bench/{id}/revisions from the page, ``--saves``
  times, each based on the previous head;
* constrained re-parse: POST /api/bench/{id}/reparse from the page with two or three gold
  constituents and one gold POS tag pinned, once per sentence.

Prints medians and 90th percentiles in milliseconds beside the targets (< 1000, < 50, < 500).
"""

from __future__ import annotations

import argparse
import random
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from sqlalchemy import select  # noqa: E402

from app.main import create_app  # noqa: E402
from app.models import ROLE_ANNOTATOR, Corpus, GrammarVersion, Sentence, User  # noqa: E402
from app.security import hash_password  # noqa: E402
from app.services import suggestions  # noqa: E402
from app.settings import Settings  # noqa: E402
from parser.grammar import train_grammar  # noqa: E402
from parser.trees import constituents, pos_tags, read_tree, read_trees, words  # noqa: E402
from tests.app.bench_helpers import assign, install_grammar, make_corpus  # noqa: E402
from tests.app.live_server import LiveServer  # noqa: E402

GUM = ROOT.parent / "shared" / "data" / "gum-trees"
CHROMIUM = "/usr/bin/chromium"
PASSWORD = "bench-pass-123"
LENGTH = 30


def percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, int(round(q * (len(ordered) - 1))))]


def line(name: str, values: list[float], target: float | None) -> None:
    med = statistics.median(values)
    verdict = (
        ""
        if target is None
        else f"  target < {target:.0f} ms: " + ("met" if med < target else "MISSED")
    )
    print(
        f"{name:<44} median {med:8.1f} ms   p90 {percentile(values, 0.9):8.1f} ms   "
        f"n={len(values)}{verdict}"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--loads", type=int, default=20)
    ap.add_argument("--saves", type=int, default=50)
    ap.add_argument("--scale", type=int, default=0, help="the scale generator's corpus size")
    args = ap.parse_args()
    files = sorted(GUM.glob("*.ptb"))
    if not files:
        sys.exit(f"no GUM trees at {GUM}")
    everything = [t for f in files for t in read_trees(f.read_text("utf-8"))]
    need = 2 * args.loads + 1
    held = [i for i, t in enumerate(everything) if len(words(t)) == LENGTH][:need]
    if len(held) < need:
        sys.exit(f"only {len(held)} {LENGTH}-word sentences in GUM; need {need}")
    gold = [everything[i] for i in held]
    skip = set(held)
    train_trees = [t for i, t in enumerate(everything) if i not in skip]
    t0 = time.perf_counter()
    grammar = train_grammar(train_trees)
    print(
        f"grammar: {len(train_trees)} GUM trees ({len(gold)} {LENGTH}-word sentences held "
        f"out), trained in {time.perf_counter() - t0:.1f} s; {grammar}"
    )
    rng = random.Random(7)

    username, password = "bench", PASSWORD
    with tempfile.TemporaryDirectory(prefix="tw-bench-page-") as tmp:
        settings = Settings(data_dir=Path(tmp), secret_key="bench", login_delay_seconds=0.05)
        if args.scale:
            import scale

            t0 = time.perf_counter()
            built = scale.build(settings, args.scale, everything)
            print(
                f"scale corpus of {args.scale} raw sentences built in "
                f"{time.perf_counter() - t0:.0f} s"
            )
            username, password = "reader", scale.PASSWORD
        app = create_app(settings)
        with app.state.sessionmaker() as db:
            if args.scale:
                corpus = db.get(Corpus, built["corpus"])
                sentences = [
                    s
                    for s in db.scalars(
                        select(Sentence)
                        .where(Sentence.corpus_id == corpus.id, Sentence.state == "queued")
                        .order_by(Sentence.id)
                    )
                    if len(s.tokens) == LENGTH
                ][:need]
                if len(sentences) < need:
                    sys.exit(f"only {len(sentences)} {LENGTH}-word sentences; need {need}")
            else:
                user = User(
                    username=username,
                    display_name="Bench Annotator",
                    role=ROLE_ANNOTATOR,
                    password_hash=hash_password(PASSWORD),
                )
                db.add(user)
                db.commit()
                corpus, sentences = make_corpus(
                    db,
                    [" ".join(words(t)) for t in gold],
                    name="GUM test slice",
                    labels=[],
                    tags=[],
                )
                assign(db, sentences, user)
            grammar_file = Path(tmp) / "g.npz"
            grammar.save(grammar_file)
            version = install_grammar(db, corpus, grammar_file.read_bytes())
            ids = [s.id for s in sentences]
            warm_id, cold_ids, cached_ids = ids[0], ids[1 : args.loads + 1], ids[args.loads + 1 :]
            # the second half gets its suggestions computed ahead, as after a retrain
            t0 = time.perf_counter()
            for sid in cached_ids:
                sentence = db.get(Sentence, sid)
                suggestions.suggestion_for(db, sentence, corpus, settings.suggestion_k)
            print(
                f"precomputed {len(cached_ids)} suggestions (k={settings.suggestion_k}, "
                f"with posteriors) in {time.perf_counter() - t0:.1f} s in this process"
            )
            gv = db.scalar(select(GrammarVersion).where(GrammarVersion.id == version.id))
            print(f"grammar version {gv.number}, {len(gv.data or b'') / 1e6:.1f} MB saved form")
        from playwright.sync_api import sync_playwright

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
            page = browser.new_page(viewport={"width": 1400, "height": 900})
            page.goto(f"{server.url}/login")
            page.fill("input[name=username]", username)
            page.fill("input[name=password]", password)
            page.click("button[type=submit]")
            page.wait_for_load_state("load")

            doubts: list[float] = []

            def load(sid: int, wait_doubts: bool = False) -> float:
                page.goto(f"{server.url}/bench/{sid}")
                page.wait_for_selector("#bench[data-ready='1']")
                drawn = page.evaluate(
                    "() => performance.getEntriesByName('bench-drawn')[0].startTime"
                )
                if wait_doubts:
                    page.wait_for_selector("#bench[data-doubts='1']", timeout=60_000)
                    doubts.append(page.evaluate("() => performance.now()"))
                return drawn

            first = load(warm_id, wait_doubts=True)
            print(f"first load after server start (loads the grammar): {first:.0f} ms")
            doubts.clear()
            cold, drawn_trees = [], []
            for sid in cold_ids:
                cold.append(load(sid, wait_doubts=True))
                drawn_trees.append(
                    read_tree(page.get_attribute("#tree-pane svg.tw-tree", "data-tree"))
                )
            again = [load(sid) for sid in cold_ids]  # the same starts, now cached
            cached = [load(sid) for sid in cached_ids]

            # saves from the page, each on top of the previous head
            sid = cached_ids[0]
            load(sid)
            tokens = page.evaluate(
                "() => JSON.parse(document.getElementById('bench-data')"
                ".textContent).sentence.tokens"
            )
            save_ms = page.evaluate(
                """async ([sid, tokens, n]) => {
                const csrf = document.querySelector('meta[name="csrf-token"]').content;
                const out = [];
                let base = 0;
                for (let i = 0; i < n; i++) {
                    const tags = tokens.map((_, k) => (k + i) % 2 ? "NN" : "XX");
                    const tree = "(ROOT (S " + tokens.map((w, k) => `(${tags[k]} ${w})`)
                        .join(" ") + "))";
                    const t0 = performance.now();
                    const r = await fetch(`/api/bench/${sid}/revisions`, {method: "POST",
                        headers: {"Content-Type": "application/json", "X-CSRF-Token": csrf},
                        body: JSON.stringify({base, tree, pins: {spans: [], tags: []},
                                              source: "edit"})});
                    const body = await r.json();
                    out.push(performance.now() - t0);
                    if (r.status !== 201) throw new Error(JSON.stringify(body));
                    base = body.revision.number;
                }
                return out;
            }""",
                [sid, tokens, args.saves],
            )

            reparse_ms = []
            pin_from = drawn_trees if args.scale else gold[1 : args.loads + 1]
            for sid, tree in zip(cold_ids, pin_from, strict=True):
                spans = constituents(tree)[1:]
                pins = {
                    "spans": [
                        [s, e, lab]
                        for lab, s, e in rng.sample(spans, min(len(spans), rng.randint(2, 3)))
                    ],
                    "tags": [[i, t] for i, t in rng.sample(list(enumerate(pos_tags(tree))), 1)],
                }
                ms = page.evaluate(
                    """async ([sid, pins]) => {
                    const csrf = document.querySelector('meta[name="csrf-token"]').content;
                    const t0 = performance.now();
                    const r = await fetch(`/api/bench/${sid}/reparse`, {method: "POST",
                        headers: {"Content-Type": "application/json", "X-CSRF-Token": csrf},
                        body: JSON.stringify({pins, k: 1})});
                    await r.json();
                    if (r.status !== 200) throw new Error("reparse " + r.status);
                    return performance.now() - t0;
                }""",
                    [sid, pins],
                )
                reparse_ms.append(ms)
            browser.close()
        with app.state.sessionmaker() as db:
            from app.models import Suggestion

            parse_s = [
                r.seconds * 1000
                for r in db.scalars(select(Suggestion).where(Suggestion.sentence_id.in_(cold_ids)))
            ]
        app.state.engine.dispose()

    print()
    line("server-side full parse (k best + posteriors)", parse_s, None)
    line(f"page to drawn suggestion, {LENGTH} words, parsed", cold, 1000)
    line(f"page to doubt marks (posteriors), {LENGTH} words", doubts, None)
    line("same sentences opened again (same start, cached)", again, 1000)
    line(f"page to drawn suggestion, {LENGTH} words, cached ahead", cached, 1000)
    line("save round trip", save_ms, 50)
    line(f"constrained re-parse, {LENGTH} words", reparse_ms, 500)


if __name__ == "__main__":
    main()
