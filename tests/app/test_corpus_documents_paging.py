"""The corpus page lists a corpus's documents a page at a time (keyset on position, then id):
every document appears exactly once across the pages, forwards and backwards, also when
documents share a position or are added between page views; the counts beside each are the
sentences' counts."""

from __future__ import annotations

import re

from sqlalchemy import func, select

from app.models import Corpus, Document, Sentence
from app.services import corpora as svc
from tests.app.bench_helpers import make_corpus


def _docs(db, corpus: Corpus, count: int, start: int = 0) -> None:  # type: ignore[no-untyped-def]
    for i in range(start, start + count):
        # positions repeat every seven documents: the id breaks the tie
        doc = Document(corpus_id=corpus.id, name=f"reel-{i:04d}", position=1 + i % 7)
        db.add(doc)
        db.flush()
        for p in range(i % 3):
            db.add(
                Sentence(
                    corpus_id=corpus.id,
                    document_id=doc.id,
                    position=p,
                    tokens=["rope", str(p)],
                    text=f"rope {p}",
                )
            )
    db.commit()


def test_document_pages_list_every_document_once(db, people) -> None:
    corpus, _ = make_corpus(db, ["the tide turned ."], name="Reels")
    _docs(db, corpus, 123)
    at_start = set(db.scalars(select(Document.id).where(Document.corpus_id == corpus.id)))
    seen: list[int] = []
    cursor = None
    pages = 0
    while True:
        page = svc.document_page(db, corpus, per_page=10, after=cursor)
        pages += 1
        seen += [r.document.id for r in page.rows]
        if pages == 3:  # documents added while someone pages through
            _docs(db, corpus, 5, start=500)
        if page.next_cursor is None:
            break
        cursor = page.next_cursor
    everything = db.scalars(
        select(Document.id)
        .where(Document.corpus_id == corpus.id)
        .order_by(Document.position, Document.id)
    ).all()
    assert len(seen) == len(set(seen))  # nobody twice
    # every document there at the start, in order; of those added meanwhile, the ones after
    # the page being read (a keyset page never shifts: an addition before it is not seen)
    assert at_start <= set(seen) and seen == [d for d in everything if d in set(seen)]
    assert page.total == len(everything) == 129
    static: list[int] = []
    cursor = None
    while True:
        page = svc.document_page(db, corpus, per_page=10, after=cursor)
        static += [r.document.id for r in page.rows]
        if page.next_cursor is None:
            break
        cursor = page.next_cursor
    assert static == list(everything)  # nothing added meanwhile: exactly every document
    # backwards from the last page gives the same documents in the same order
    back: list[int] = []
    cursor = svc.document_page(db, corpus, per_page=10, after=None)
    while cursor.next_cursor is not None:
        cursor = svc.document_page(db, corpus, per_page=10, after=cursor.next_cursor)
    back = [r.document.id for r in cursor.rows]
    while cursor.prev_cursor is not None:
        cursor = svc.document_page(db, corpus, per_page=10, before=cursor.prev_cursor)
        back = [r.document.id for r in cursor.rows] + back
    assert back == list(everything)


def test_document_page_counts_equal_a_recount(db, people) -> None:
    corpus, _ = make_corpus(db, ["the tide turned ."], name="Reels")
    _docs(db, corpus, 30)
    page = svc.document_page(db, corpus, per_page=12)
    for row in page.rows:
        mine = Sentence.document_id == row.document.id
        recount = db.scalar(select(func.count()).select_from(Sentence).where(mine))
        assert row.sentences == recount == sum(row.states.values())


def test_corpus_page_shows_one_page_of_documents(login, db, people) -> None:
    corpus, _ = make_corpus(db, ["the tide turned ."], name="Reels")
    _docs(db, corpus, 120)
    admin = login("admin")
    html = admin.client.get(f"/corpora/{corpus.id}").text
    names = set(re.findall(r">(reel-\d{4}|workshop-log)</a>", html))
    assert len(names) == 50  # one page of the 121 documents, not all of them
    nxt = re.search(r'href="([^"]*docs_after=[^"]+)" class="cp-docs-next"', html)
    assert nxt is not None
    html2 = admin.client.get(nxt.group(1).replace("&amp;", "&")).text
    names2 = set(re.findall(r">(reel-\d{4}|workshop-log)</a>", html2))
    assert len(names2) == 50 and not names & names2
    bad = admin.client.get(f"/corpora/{corpus.id}?docs_after=x-y")
    assert bad.status_code == 422 and "document cursor" in bad.text
    # a document chosen as a filter stays in the chooser when it is not on the page shown
    far = db.scalar(select(Document).where(Document.name == "reel-0119"))
    assert far is not None
    chosen = admin.client.get(f"/corpora/{corpus.id}?document={far.id}").text
    assert f'<option value="{far.id}" selected>reel-0119</option>' in chosen


def test_corpus_api_pages_list_every_document_once(login, db, people) -> None:
    """/api/corpora/{id} gives one page of documents and a cursor to the next: following the
    cursors lists every document once, in order, while documents are added between pages."""
    corpus, _ = make_corpus(db, ["the tide turned ."], name="Reels")
    _docs(db, corpus, 45)
    at_start = set(db.scalars(select(Document.id).where(Document.corpus_id == corpus.id)))
    reader = login("adj")  # adjudicators read every corpus
    seen: list[int] = []
    url = f"/api/corpora/{corpus.id}?per_page=7"
    first = None
    for pages in range(1, 100):
        resp = reader.client.get(url)
        assert resp.status_code == 200, resp.text
        body = resp.json()
        first = first or body
        assert len(body["document_list"]) <= 7 and body["document_per_page"] == 7
        seen += [d["id"] for d in body["document_list"]]
        if pages == 2:  # added while someone pages through, at every position
            _docs(db, corpus, 9, start=700)
        if body["document_next_cursor"] is None:
            break
        url = f"/api/corpora/{corpus.id}?per_page=7&after={body['document_next_cursor']}"
    everything = db.scalars(
        select(Document.id)
        .where(Document.corpus_id == corpus.id)
        .order_by(Document.position, Document.id)
    ).all()
    assert len(seen) == len(set(seen))
    assert at_start <= set(seen) and seen == [d for d in everything if d in set(seen)]
    # the corpus's other fields stay: all documents counted, one page listed
    assert first is not None and first["documents"] == 46 and first["name"] == "Reels"
    bad = reader.client.get(f"/api/corpora/{corpus.id}?after=up-the-river")
    assert bad.status_code == 422 and "POSITION-ID" in bad.text
