"""A small invented gold treebank with one inconsistency of each kind, for the findings and
search tests (the ferry cooperative of the demo; no real names)."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.models import Corpus, Sentence
from app.services.imports import import_bytes

# "the old pump" is an NP twice and an ADJP once in the same surroundings; "bell" between
# "the" and "rang" is tagged NN once and VB once.
GOLD = [
    "(ROOT (S (NP (DT the) (JJ old) (NN pump)) (VP (VBD failed)) (. .)))",
    "(ROOT (S (NP (DT the) (JJ old) (NN pump)) (VP (VBD failed)) (ADVP (RB again)) (. .)))",
    "(ROOT (S (ADJP (DT the) (JJ old) (NN pump)) (VP (VBD failed)) (ADVP (RB today)) (. .)))",
    "(ROOT (S (NP (DT the) (NN mate)) (VP (VBD rang) (NP (DT the) (NN bell))) (. .)))",
    "(ROOT (S (NP (DT the) (NN ferry)) (VP (VBD left) (NP (DT the) (NN quay))) (. .)))",
    "(ROOT (S (NP (DT the) (NN bell)) (VP (VBD rang)) (. .)))",
    "(ROOT (S (NP (DT the) (VB bell)) (VP (VBD rang) (ADVP (RB twice))) (. .)))",
]
OLD_PUMP = "the old pump"


def import_gold(
    db: Session, name: str = "Ferry quality", trees: list[str] | None = None
) -> tuple[Corpus, list[Sentence]]:
    data = ("\n".join(trees or GOLD) + "\n").encode()
    import_bytes(db, data, source="quality.ptb", corpus_name=name, kind="gold")
    corpus = db.scalar(select(Corpus).where(Corpus.name == name))
    assert corpus is not None
    sentences = list(
        db.scalars(select(Sentence).where(Sentence.corpus_id == corpus.id).order_by(Sentence.id))
    )
    return corpus, sentences
