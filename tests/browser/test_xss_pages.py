"""Hostile text shows as text on every page, and no script of it runs.

An imported sentence holds the word ``<img src=x onerror=alert(1)>`` (and other markup and
script payloads); an annotator's display name, a document name and a flag reason carry more.
Two annotators submit different trees of it, so it also waits in Review. Then every page that
can show it is opened in Chromium: corpora list, corpus page, Queue, Bench, Review list and
sentence, Agreement, Grammars, Transfer, Users. On each: no dialog opened, no payload
changed the page's global state, no element carries an event-handler attribute or the
payload's image, no console error, no Content-Security-Policy violation, and the payload's
text is there to read.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select

from app.models import Corpus, Sentence, User
from app.services.imports import import_bytes
from tests.app.bench_helpers import assign
from tests.app.conftest import PASSWORD
from tests.app.live_server import Client
from tests.browser.conftest import login_as

PAYLOAD = "<img src=x onerror=alert(1)>"
SENTENCES = [
    f"The mate wrote {PAYLOAD} in the log .",
    "Then <script>window.__pwned=2</script> appeared on the chart .",
    'A "><svg/onload=window.__pwned=3> and {{7*7}} stayed .',
]
DISPLAY_NAME = "<img src=y onerror=window.__pwned=4>"
FLAG = "<b onmouseover=window.__pwned=5>odd</b>"

WATCH = """
window.__csp = [];
document.addEventListener('securitypolicyviolation',
  e => window.__csp.push(e.violatedDirective + ' ' + (e.blockedURI || '')));
"""


def _seed(live: Any) -> dict[str, int]:
    db = live.sessionmaker()
    try:
        text = ("\n".join(SENTENCES) + "\n").encode()
        result = import_bytes(
            db,
            text,
            source="log.txt",
            corpus_name="Harbour log",
            document_name="<i>night</i> watch",
            kind="text",
        )
        corpus = db.get(Corpus, result.corpus_id)
        sentences = db.scalars(
            select(Sentence).where(Sentence.corpus_id == corpus.id).order_by(Sentence.position)
        ).all()
        ann1 = db.scalar(select(User).where(User.username == "ann1"))
        ann2 = db.scalar(select(User).where(User.username == "ann2"))
        ann2.display_name = DISPLAY_NAME
        db.commit()
        assign(db, sentences, ann1, ann2)
        return {
            "corpus": corpus.id,
            "first": sentences[0].id,
            "second": sentences[1].id,
            "third": sentences[2].id,
        }
    finally:
        db.close()


def _submit(live: Any, username: str, sentence_id: int, tags_first: str) -> None:
    client = Client(live.base_url, username, PASSWORD)
    try:
        bench = client.http.get(f"/api/bench/{sentence_id}").json()
        tokens = bench["sentence"]["tokens"]
        tags = [tags_first] + ["NN"] * (len(tokens) - 2) + ["."]
        tree = (
            "(ROOT (S " + " ".join(f"({t} {w})" for t, w in zip(tags, tokens, strict=True)) + "))"
        )
        saved = client.save(sentence_id, 0, tree)
        assert saved.status_code == 201, saved.text
        done = client.http.post(
            f"/api/bench/{sentence_id}/submit",
            headers={"X-CSRF-Token": client.csrf},
            json={"base": 1},
        )
        assert done.status_code == 200, done.text
    finally:
        client.close()


def _flag(live: Any, sentence_id: int) -> None:
    client = Client(live.base_url, "ann1", PASSWORD)
    try:
        resp = client.http.patch(
            f"/api/bench/{sentence_id}/note",
            headers={"X-CSRF-Token": client.csrf},
            json={"flag": FLAG, "comment": PAYLOAD},
        )
        assert resp.status_code == 200, resp.text
    finally:
        client.close()


def _inspect(page: Any, url: str, dialogs: list[str]) -> list[str]:
    """Open ``url``; return what went wrong there (empty when the page is safe)."""
    page.console_errors.clear()
    resp = page.goto(url)
    page.wait_for_load_state("networkidle")
    problems = []
    if resp is None or resp.status != 200:
        problems.append(f"status {resp.status if resp else None}")
    if dialogs:
        problems.append(f"dialogs {dialogs}")
    if page.evaluate("window.__pwned") is not None:
        problems.append(f"payload ran: window.__pwned = {page.evaluate('window.__pwned')}")
    handlers = page.evaluate("""() => [...document.querySelectorAll('*')].flatMap(el =>
        [...el.attributes].filter(a => /^on/i.test(a.name)).map(a => el.tagName + ' ' + a.name))""")
    if handlers:
        problems.append(f"event-handler attributes {handlers}")
    if page.locator("img[src='x'], img[src='y']").count():
        problems.append("the payload's element is in the page")
    # the only scripts are our modules and inert JSON data blocks, whose text has no raw '<'
    # (so a word like </script> cannot end the block early)
    scripts = page.evaluate("""() => [...document.scripts].map(s => [s.type, s.src, s.text])""")
    for kind, src, text in scripts:
        if src and kind == "module":
            continue
        if kind == "application/json" and "<" not in text:
            continue
        problems.append(f"script element type={kind!r} src={src!r}: {text[:80]!r}")
    violations = page.evaluate("window.__csp")
    if violations:
        problems.append(f"CSP violations {violations}")
    if page.console_errors:
        problems.append(f"console errors {page.console_errors}")
    return problems


def test_xss_hostile_text_is_inert_on_every_page(browser_page, live_server) -> None:
    page = browser_page
    ids = _seed(live_server)
    _submit(live_server, "ann1", ids["first"], "NN")
    _submit(live_server, "ann2", ids["first"], "DT")  # they differ: the sentence is in review
    _flag(live_server, ids["third"])
    dialogs: list[str] = []
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    page.add_init_script(WATCH)
    base, corpus = live_server.base_url, ids["corpus"]

    shows_sentence = {
        "/": [],  # corpora list: counts only
        f"/corpora/{corpus}": [PAYLOAD, "<i>night</i> watch"],
        f"/review?corpus={corpus}": [PAYLOAD],
        f"/review/{ids['first']}": ["onerror=alert(1)>", DISPLAY_NAME],
        f"/agreement?corpus={corpus}": [DISPLAY_NAME],
        f"/grammars?corpus={corpus}": [],
        "/transfer": ["<i>night</i> watch"],
        "/users": [DISPLAY_NAME],
    }
    problems: dict[str, list[str]] = {}
    login_as(page, base, "admin")
    for path, texts in shows_sentence.items():
        found = _inspect(page, base + path, dialogs)
        content = page.locator("body").text_content() or ""
        found += [f"text {t!r} not shown" for t in texts if t not in content]
        if found:
            problems[path] = found

    page.context.clear_cookies()
    login_as(page, base, "ann1")
    annotator_pages = {
        "/queue": [PAYLOAD, "<script>window.__pwned=2</script>"],
        f"/bench/{ids['second']}": ["<script>window.__pwned=2</script>"],
        f"/bench/{ids['third']}": ["{{7*7}}", FLAG],
    }
    for path, texts in annotator_pages.items():
        found = _inspect(page, base + path, dialogs)
        content = page.locator("body").text_content() or ""
        shown = content + " ".join(page.locator("svg text").all_text_contents())
        found += [
            f"text {t!r} not shown"
            for t in texts
            if t not in shown and t.replace(" ", "") not in shown.replace(" ", "")
        ]
        if found:
            problems[path] = found
    assert "49" not in (page.locator("body").text_content() or "")  # {{7*7}} not evaluated
    assert not problems, problems
