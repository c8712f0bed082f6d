"""Reference sets: trees from outside a corpus that its grammars train on beside its gold.

An admin imports a bracketed file as a reference set of a corpus, with a name, where it comes
from and its licence text (an open treebank under its licence, or the team's older trees). The
trees are stored whole in the set's own row (one bracketed tree per line, empty elements
removed, as parser.trees.write_tree writes them) and never become sentences: they are not in
the corpus's queue, its agreement figures or its exports. Training counts them against the
corpus's gold as the corpus setting ``reference_weight`` says (app.services.training).

The file is read completely before anything is written, with the checks and the line and
column messages of a gold import (app.services.imports.read_tree_items); a bad file stores
nothing.
"""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.models import Event, ReferenceSet, User
from app.services.corpora import clean_name, get_corpus
from app.services.errors import BadInput, Conflict, NotFound
from app.services.imports import decode, read_tree_items
from app.services.transactions import unit_of_work

MAX_LICENCE = 20_000


@dataclass(frozen=True)
class ReferenceSummary:
    id: int
    name: str
    source: str
    licence: str
    trees: int
    words: int
    in_use: bool


def _summary(row: ReferenceSet) -> ReferenceSummary:
    return ReferenceSummary(
        row.id, row.name, row.source, row.licence, row.tree_count, row.word_count, row.in_use
    )


@unit_of_work
def add_reference(
    db: Session,
    corpus_id: int,
    data: bytes,
    *,
    name: str,
    source: str,
    licence: str,
    filename: str,
    user: User | None = None,
) -> ReferenceSummary:
    """Store the trees of a bracketed file as a reference set of the corpus. Commits."""
    corpus = get_corpus(db, corpus_id)
    name = clean_name(name, "reference set")
    if not licence.strip():
        raise BadInput(
            "a reference set needs its licence text (or a line saying the trees are the team's own)"
        )
    if len(licence) > MAX_LICENCE:
        raise BadInput(f"the licence text has {len(licence)} characters; at most {MAX_LICENCE}")
    if (
        db.scalar(
            select(ReferenceSet.id).where(
                ReferenceSet.corpus_id == corpus.id, ReferenceSet.name == name
            )
        )
        is not None
    ):
        raise Conflict(f"corpus {corpus.name!r} already has a reference set named {name!r}")
    items, _, _, _ = read_tree_items(decode(data, filename), filename)
    if not items:
        raise BadInput(f"{filename}: no trees in the file")
    row = ReferenceSet(
        corpus_id=corpus.id,
        name=name,
        source=source.strip(),
        licence=licence.strip(),
        trees="".join(f"{i.tree}\n" for i in items),
        tree_count=len(items),
        word_count=sum(len(i.tokens) for i in items),
        in_use=True,
        created_by=user.id if user else None,
    )
    db.add(row)
    db.flush()
    db.add(
        Event(
            user_id=user.id if user else None,
            kind="reference.added",
            corpus_id=corpus.id,
            detail={"name": name, "trees": len(items), "file": filename},
        )
    )
    return _summary(row)


@unit_of_work
def set_in_use(
    db: Session, reference_id: int, in_use: bool, user: User | None = None
) -> ReferenceSummary:
    """Let training use the set, or stop it (the set stays stored). Commits."""
    row = db.get(ReferenceSet, reference_id)
    if row is None:
        raise NotFound(f"no reference set with id {reference_id}")
    row.in_use = in_use
    db.add(
        Event(
            user_id=user.id if user else None,
            kind="reference.in_use",
            corpus_id=row.corpus_id,
            detail={"name": row.name, "in_use": in_use},
        )
    )
    db.flush()
    return _summary(row)


def reference_sets(db: Session, corpus_id: int) -> list[ReferenceSummary]:
    """The corpus's reference sets, oldest first (the trees are not loaded)."""
    return [
        _summary(r)
        for r in db.scalars(
            select(ReferenceSet)
            .where(ReferenceSet.corpus_id == corpus_id)
            .order_by(ReferenceSet.id)
        )
    ]


def names_by_id(db: Session, corpus_id: int) -> dict[int, str]:
    return {r.id: r.name for r in reference_sets(db, corpus_id)}
