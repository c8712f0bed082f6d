"""Search a corpus's sentences, gold trees and annotations with a pattern (parser.treequery).

Where it looks (``scope``)
    * ``sentences``: the words of every sentence (word strings only; everyone may search them,
      as everyone may read the corpus page);
    * ``gold``: the current gold trees;
    * ``annotations``: the newest saved tree of each annotation.

Who sees what
    Adjudicators and admins see everything in every scope. An annotator sees, among the
    annotations, only their own (drafts included: never another annotator's work, settled or
    not; settled work reaches them as gold), and the gold only when the corpus setting
    ``gold_visible_to_annotators`` allows it (otherwise the gold scope answers 403).

Results are sentences in document order with the matching spans, filterable by sentence state,
a page at a time; :func:`export_text` gives every matching tree as bracketed text, one per line.

Cost: each (corpus, scope) keeps a :class:`parser.treequery.SearchIndex` in memory, rebuilt
when a cheap fingerprint of the rows changes (count and newest id); a rebuild reuses the trees
it had already read (gold rows and revisions never change). A word string is one
regular-expression scan over the corpus text; a fragment visits only the trees holding its
labels and words. A state filter reads the ids of the sentences in that state (one column).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from nltk import Tree
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.models import (
    SENTENCE_STATES,
    Annotation,
    Corpus,
    Document,
    Gold,
    Revision,
    Sentence,
    User,
)
from app.services.blind import unfinished_sentences
from app.services.errors import BadInput, Forbidden
from app.services.paging import PageWindow
from parser.treequery import Fragment, Pattern, QuerySyntaxError, SearchIndex, parse_pattern
from parser.trees import read_tree, write_tree

SCOPE_SENTENCES = "sentences"
SCOPE_GOLD = "gold"
SCOPE_ANNOTATIONS = "annotations"
SCOPES = (SCOPE_SENTENCES, SCOPE_GOLD, SCOPE_ANNOTATIONS)


@dataclass(frozen=True)
class EntryKey:
    sentence_id: int
    row_id: int  # gold id, annotation id, or the sentence id
    user_id: int | None  # the annotator of an annotation


@dataclass
class _Cached:
    fingerprint: tuple[Any, ...]
    index: SearchIndex
    trees: dict[EntryKey, Tree]
    #: parsed trees by the id of their gold row or revision (immutable rows)
    parsed: dict[int, Tree]


_CACHE: dict[tuple[str, int, datetime | None, str], _Cached] = {}
_LOCK = threading.Lock()


def _fingerprint(db: Session, corpus_id: int, scope: str) -> tuple[Any, ...]:
    if scope == SCOPE_GOLD:
        q = (
            select(func.count(Gold.id), func.max(Gold.id))
            .join(Sentence, Sentence.id == Gold.sentence_id)
            .where(Sentence.corpus_id == corpus_id, Gold.retired_at.is_(None))
        )
    elif scope == SCOPE_ANNOTATIONS:
        q = (
            select(func.count(Revision.id), func.max(Revision.id))
            .join(Annotation, Annotation.id == Revision.annotation_id)
            .join(Sentence, Sentence.id == Annotation.sentence_id)
            .where(Sentence.corpus_id == corpus_id)
        )
    else:
        q = select(func.count(Sentence.id), func.max(Sentence.id)).where(
            Sentence.corpus_id == corpus_id
        )
    row = db.execute(q).one()
    return tuple(row)


def _rows(db: Session, corpus_id: int, scope: str) -> list[tuple[EntryKey, int, str]]:
    """(entry key, id of the immutable row holding the tree, tree text) of a tree scope."""
    if scope == SCOPE_GOLD:
        return [
            (EntryKey(sid, gid, None), gid, text)
            for sid, gid, text in db.execute(
                select(Gold.sentence_id, Gold.id, Gold.tree)
                .join(Sentence, Sentence.id == Gold.sentence_id)
                .where(Sentence.corpus_id == corpus_id, Gold.retired_at.is_(None))
                .order_by(Gold.sentence_id, Gold.id)
            )
        ]
    return [
        (EntryKey(sid, aid, uid), rid, text)
        for sid, aid, uid, rid, text in db.execute(
            select(
                Annotation.sentence_id,
                Annotation.id,
                Annotation.user_id,
                Revision.id,
                Revision.tree,
            )
            .join(
                Revision,
                (Revision.annotation_id == Annotation.id) & (Revision.number == Annotation.head),
            )
            .join(Sentence, Sentence.id == Annotation.sentence_id)
            .where(Sentence.corpus_id == corpus_id)
            .order_by(Annotation.sentence_id, Annotation.id)
        )
    ]


def _build(
    db: Session, corpus_id: int, scope: str, old: _Cached | None, fingerprint: tuple[Any, ...]
) -> _Cached:
    index = SearchIndex()
    if scope == SCOPE_SENTENCES:
        for sid, tokens in db.execute(
            select(Sentence.id, Sentence.tokens)
            .where(Sentence.corpus_id == corpus_id)
            .order_by(Sentence.id)
        ):
            index.add(EntryKey(sid, sid, None), tokens)
        return _Cached(fingerprint, index, {}, {})
    known = old.parsed if old is not None else {}
    parsed: dict[int, Tree] = {}
    trees: dict[EntryKey, Tree] = {}
    for key, row_id, text in _rows(db, corpus_id, scope):
        tree = known.get(row_id)
        if tree is None:
            tree = read_tree(text)
        parsed[row_id] = trees[key] = tree
        index.add(key, tree.leaves(), tree)
    return _Cached(fingerprint, index, trees, parsed)


def _index(db: Session, corpus_id: int, scope: str) -> _Cached:
    bind = db.get_bind()
    url = bind.url.render_as_string(hide_password=True) if hasattr(bind, "url") else str(bind)
    # the corpus's creation time is in the key: ids can come back (a corpus removed and
    # another made in its place, a database emptied), and an old index must never be reused
    created = db.scalar(select(Corpus.created_at).where(Corpus.id == corpus_id))
    cache_key = (url, corpus_id, created, scope)
    fingerprint = _fingerprint(db, corpus_id, scope)
    with _LOCK:
        cached = _CACHE.get(cache_key)
    if cached is not None and cached.fingerprint == fingerprint:
        return cached
    # built outside the lock: a search of another corpus never waits for this one
    fresh = _build(db, corpus_id, scope, cached, fingerprint)
    with _LOCK:
        _CACHE[cache_key] = fresh
    return fresh


def forget(corpus_id: int | None = None) -> None:
    """Drop cached indexes (of one corpus, or all)."""
    with _LOCK:
        for key in [k for k in _CACHE if corpus_id is None or k[1] == corpus_id]:
            del _CACHE[key]


# --------------------------------------------------------------------------------------------
# searching


def read_pattern(text: str) -> Pattern:
    try:
        return parse_pattern(text)
    except QuerySyntaxError as err:
        raise BadInput(f"pattern, {err}", kind="pattern", column=err.column) from err


def _sees_all(user: User | None) -> bool:
    """Adjudicators, admins and the command line (no user) see everything."""
    return user is None or user.can_adjudicate


def check_access(corpus: Corpus, user: User | None, scope: str) -> None:
    if scope not in SCOPES:
        raise BadInput(f"unknown scope {scope!r}; one of {', '.join(SCOPES)}", kind="scope")
    if (
        scope == SCOPE_GOLD
        and not _sees_all(user)
        and not corpus.options.gold_visible_to_annotators
    ):
        raise Forbidden(f"corpus {corpus.name!r} does not let annotators search its gold")


def default_scope(corpus: Corpus, user: User | None) -> str:
    """The gold when the user may search it, else the user's own annotations."""
    if _sees_all(user) or corpus.options.gold_visible_to_annotators:
        return SCOPE_GOLD
    return SCOPE_ANNOTATIONS


@dataclass
class SearchHit:
    sentence_id: int
    document: str
    position: int
    state: str
    words: list[str]
    tree: str | None
    spans: list[tuple[int, int]]
    source: str  # "gold" | "annotation" | "sentence"
    annotator: str | None
    link: str | None


@dataclass(kw_only=True)
class SearchPage(PageWindow):
    pattern: str
    scope: str
    state: str | None
    hits: list[SearchHit]


@dataclass(frozen=True)
class _Match:
    key: EntryKey
    entry: int
    spans: tuple[tuple[int, int], ...]


def _matches(
    db: Session, corpus: Corpus, user: User | None, pattern_text: str, scope: str, state: str | None
) -> tuple[_Cached, list[_Match]]:
    check_access(corpus, user, scope)
    if state and state not in SENTENCE_STATES:
        raise BadInput(
            f"unknown sentence state {state!r}; one of {', '.join(SENTENCE_STATES)}", kind="state"
        )
    pattern = read_pattern(pattern_text)
    if scope == SCOPE_SENTENCES and isinstance(pattern, Fragment):
        raise BadInput(
            "a bracketed fragment searches trees: choose the gold or the annotations", kind="scope"
        )
    cached = _index(db, corpus.id, scope)
    allowed: set[int] | None = None
    if state:
        allowed = set(
            db.scalars(
                select(Sentence.id).where(Sentence.corpus_id == corpus.id, Sentence.state == state)
            )
        )
    only_user = (
        user.id
        if scope == SCOPE_ANNOTATIONS and user is not None and not user.can_adjudicate
        else None
    )
    # blind annotation: not even an adjudicator sees others' trees of what they still annotate
    blind = (
        unfinished_sentences(db, user)
        if scope == SCOPE_ANNOTATIONS and user is not None and only_user is None
        else set()
    )
    out = []
    for hit in cached.index.search(pattern):
        key = hit.key
        assert isinstance(key, EntryKey)
        if only_user is not None and key.user_id != only_user:
            continue
        if key.sentence_id in blind and key.user_id != user.id:  # type: ignore[union-attr]
            continue
        if allowed is not None and key.sentence_id not in allowed:
            continue
        out.append(_Match(key, hit.entry, hit.spans))
    return cached, out


def _link(scope: str, key: EntryKey, user: User | None) -> str | None:
    if _sees_all(user):
        return f"/review/{key.sentence_id}"
    if scope == SCOPE_ANNOTATIONS and user is not None and key.user_id == user.id:
        return f"/bench/{key.sentence_id}"
    return None


def search(
    db: Session,
    corpus: Corpus,
    user: User | None,
    pattern_text: str,
    *,
    scope: str = SCOPE_GOLD,
    state: str | None = None,
    page: int = 1,
    per_page: int = 20,
) -> SearchPage:
    """One page of the sentences whose ``scope`` matches the pattern, as ``user`` may see
    (``None``: the command line, which sees everything)."""
    per_page = min(max(per_page, 1), 200)
    page = max(page, 1)
    cached, found = _matches(db, corpus, user, pattern_text, scope, state)
    window = found[(page - 1) * per_page : page * per_page]
    sids = [m.key.sentence_id for m in window]
    info = (
        {
            sid: (doc, pos, st, toks)
            for sid, doc, pos, st, toks in db.execute(
                select(
                    Sentence.id, Document.name, Sentence.position, Sentence.state, Sentence.tokens
                )
                .join(Document, Document.id == Sentence.document_id)
                .where(Sentence.id.in_(sids))
            )
        }
        if sids
        else {}
    )
    uids = {m.key.user_id for m in window if m.key.user_id is not None}
    names = (
        dict(db.execute(select(User.id, User.username).where(User.id.in_(uids))).all())
        if uids
        else {}
    )
    source = {SCOPE_GOLD: "gold", SCOPE_ANNOTATIONS: "annotation"}.get(scope, "sentence")
    hits = []
    for m in window:
        doc, pos, st, toks = info[m.key.sentence_id]
        tree = cached.trees.get(m.key)
        hits.append(
            SearchHit(
                m.key.sentence_id,
                doc,
                pos,
                st,
                list(toks),
                write_tree(tree) if tree is not None else None,
                list(m.spans),
                source,
                names.get(m.key.user_id) if m.key.user_id else None,
                _link(scope, m.key, user),
            )
        )
    return SearchPage(
        pattern=pattern_text,
        scope=scope,
        state=state,
        hits=hits,
        page=page,
        per_page=per_page,
        total=len(found),
    )


def export_text(
    db: Session,
    corpus: Corpus,
    user: User | None,
    pattern_text: str,
    *,
    scope: str = SCOPE_GOLD,
    state: str | None = None,
) -> str:
    """Every matching tree as one-line bracketed text (sentences scope: the words, each a
    flat line), one per line."""
    cached, found = _matches(db, corpus, user, pattern_text, scope, state)
    lines = []
    for m in found:
        tree = cached.trees.get(m.key)
        lines.append(
            write_tree(tree) if tree is not None else " ".join(cached.index.tokens[m.entry])
        )
    return "\n".join(lines) + ("\n" if lines else "")
