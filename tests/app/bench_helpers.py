"""Helpers for Bench and suggestion tests: a small corpus with assignments, and a grammar
trained once per test process on a slice of the shared GUM trees.

The demo sentences are invented (a ferry workshop's log); no real person is named.
"""

from __future__ import annotations

from functools import lru_cache

from sqlalchemy.orm import Session

from app.models import (
    GV_READY,
    Assignment,
    Corpus,
    Document,
    GrammarVersion,
    Sentence,
    User,
)
from parser.trees import read_trees, words

FERRY_SENTENCES = [
    "The port engine was stopped for an oil change .",
    "Check the bilge pump before the first crossing .",
    "The spare propeller has not been delivered .",
    "Who signed off the ramp inspection ?",
]

FERRY_LABELS = [
    "ROOT",
    "S",
    "SQ",
    "SBARQ",
    "NP",
    "NP-SBJ",
    "VP",
    "PP",
    "ADJP",
    "ADVP",
    "SBAR",
    "WHNP",
    "PRT",
    "FRAG",
]
FERRY_TAGS = [
    "DT",
    "NN",
    "NNS",
    "NNP",
    "VBD",
    "VBN",
    "VBZ",
    "VB",
    "VBP",
    "IN",
    "JJ",
    "RB",
    "RP",
    "WP",
    "CD",
    "MD",
    "PRP",
    "CC",
    "TO",
    ".",
    ",",
    "?",
    ":",
]

#: GUM files (sorted by name) used to train the test grammar; the rest are for testing.
TRAIN_FILES = 40


def make_corpus(
    db: Session,
    texts: list[str] | None = None,
    *,
    name: str = "Ferry log",
    policy: str = "confirm",
    labels: list[str] | None = None,
    tags: list[str] | None = None,
) -> tuple[Corpus, list[Sentence]]:
    """A corpus with one document holding ``texts`` (whitespace-tokenized)."""
    corpus = Corpus(
        name=name,
        label_set=FERRY_LABELS if labels is None else labels,
        tag_set=FERRY_TAGS if tags is None else tags,
        settings={"unknown_label_policy": policy},
    )
    db.add(corpus)
    db.flush()
    doc = Document(corpus_id=corpus.id, name="workshop-log", position=0)
    db.add(doc)
    db.flush()
    sentences = []
    for i, text in enumerate(texts if texts is not None else FERRY_SENTENCES):
        s = Sentence(
            corpus_id=corpus.id, document_id=doc.id, position=i, tokens=text.split(), text=text
        )
        db.add(s)
        sentences.append(s)
    db.commit()
    return corpus, sentences


def assign(db: Session, sentences: list[Sentence], *users: User) -> None:
    for s in sentences:
        for u in users:
            db.add(Assignment(sentence_id=s.id, user_id=u.id))
    db.commit()


def flat_text(tokens: list[str], tags: list[str] | None = None) -> str:
    tags = tags or ["NN"] * len(tokens)
    return "(ROOT (S " + " ".join(f"({t} {w})" for t, w in zip(tags, tokens, strict=True)) + "))"


@lru_cache(maxsize=4)
def gum_grammar_bytes(train_files: int = TRAIN_FILES) -> bytes:
    """A grammar trained on the first ``train_files`` GUM files, saved form. Trained once per
    test run: the file is shared by the pytest-xdist workers (tests.parser.gum_grammar)."""
    from tests.parser.gum_grammar import trained_path
    from tests.shared_data import gum_files

    def trees() -> list:
        out = []
        for path in gum_files()[:train_files]:
            out.extend(read_trees(path.read_text(encoding="utf-8"), source=path.name))
        return out

    return trained_path(f"gum-first-{train_files}", trees).read_bytes()


def heldout_gum_trees(limit: int, min_words: int = 3, max_words: int = 40) -> list:
    """GUM trees from files not used for training, in file order."""
    from tests.shared_data import gum_files

    out = []
    for path in gum_files()[TRAIN_FILES:]:
        for tree in read_trees(path.read_text(encoding="utf-8"), source=path.name):
            if min_words <= len(words(tree)) <= max_words:
                out.append(tree)
                if len(out) == limit:
                    return out
    return out


def install_grammar(db: Session, corpus: Corpus, data: bytes, number: int = 1) -> GrammarVersion:
    """Store ``data`` as a ready grammar version of ``corpus`` and make it active."""
    version = GrammarVersion(
        corpus_id=corpus.id, number=number, status=GV_READY, data=data, training_size=0
    )
    db.add(version)
    db.flush()
    corpus.active_grammar_id = version.id
    db.commit()
    return version


def gum_sentence_corpus(
    db: Session, trees: list, annotator: User, name: str = "GUM slice"
) -> tuple[Corpus, list[tuple[Sentence, object]]]:
    """A corpus (any label and tag) with one document holding ``trees``' words as sentences,
    all assigned to ``annotator``; returns the corpus and its (sentence, gold tree) pairs."""
    corpus, sentences = make_corpus(
        db, [" ".join(words(t)) for t in trees], name=name, labels=[], tags=[]
    )
    assign(db, sentences, annotator)
    return corpus, list(zip(sentences, trees, strict=True))
