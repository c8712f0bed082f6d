"""Helpers for the review and gold-loop tests: seed gold from the demo corpus (an invented
ferry cooperative, app/demo/gold_*.ptb), submitting through the Bench API, waiting for a
grammar job."""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.models import GV_QUEUED, GV_READY, GV_TRAINING, Corpus, GrammarVersion
from app.services.imports import import_bytes

DEMO = Path(__file__).resolve().parents[2] / "app" / "demo"

# One invented sentence and two annotators' trees of it, with figures worked out by hand in
# test_agreement_log.py (PARSEVAL: no ROOT, no POS level, the final "." not counted).
SENTENCE = "the ferry left the quay at dawn ."
# A: S(0,7) NP(0,2) VP(2,7) NP(3,5) PP(5,7) NP(6,7)                 -> 6 constituents
TREE_A = (
    "(ROOT (S (NP (DT the) (NN ferry)) (VP (VBD left) (NP (DT the) (NN quay)) "
    "(PP (IN at) (NP (NN dawn)))) (. .)))"
)
# B: S(0,7) NP(0,2) VP(2,7) NP(3,7) NP(3,5) ADVP(5,7) NP(6,7)       -> 7 constituents
TREE_B = (
    "(ROOT (S (NP (DT the) (NN ferry)) (VP (VBD left) (NP (NP (DT the) (NN quay)) "
    "(ADVP (IN at) (NP (NN dawn))))) (. .)))"
)
LABELS = ["ROOT", "S", "NP", "VP", "PP", "ADVP"]
TAGS = ["DT", "NN", "VBD", "IN", "."]


def import_demo_gold(
    db: Session,
    corpus_name: str = "Ferry",
    *,
    settings: dict[str, Any] | None = None,
    raw: str | None = None,
) -> Corpus:
    """The demo's 75 gold trees as seed gold of a new corpus, plus optional raw text lines.

    ``settings`` are applied after the gold import (which may already queue a version)."""
    for path in sorted(DEMO.glob("gold_*.ptb")):
        import_bytes(db, path.read_bytes(), source=path.name, corpus_name=corpus_name, kind="gold")
    corpus = db.scalar(select(Corpus).where(Corpus.name == corpus_name))
    assert corpus is not None
    if raw:
        import_bytes(db, raw.encode(), source="fresh.txt", corpus_name=corpus_name, kind="text")
    if settings:
        corpus.settings = {**corpus.settings, **settings}
        db.commit()
    return corpus


def submit_tree(who: Any, sentence_id: int, tree: str) -> None:
    """Save ``tree`` as ``who``'s first revision and submit it (Bench JSON API)."""
    saved = who.client.post(
        f"/api/bench/{sentence_id}/revisions", json={"base": 0, "tree": tree}, headers=who.headers()
    )
    assert saved.status_code == 201, saved.text
    head = saved.json()["annotation"]["head"]
    done = who.client.post(
        f"/api/bench/{sentence_id}/submit", json={"base": head}, headers=who.headers()
    )
    assert done.status_code == 200, done.text


def wait_for_version(db: Session, version_id: int, timeout: float = 120.0) -> GrammarVersion:
    """Poll the row until its job is finished (ready and refreshed, rejected or failed)."""
    deadline = time.monotonic() + timeout
    while True:
        db.expire_all()
        v = db.get(GrammarVersion, version_id)
        assert v is not None
        # a ready version is done once its suggestions are refreshed (progress 1.0)
        if v.status not in (GV_QUEUED, GV_TRAINING) and (v.status != GV_READY or v.progress >= 1.0):
            return v
        if time.monotonic() > deadline:
            raise AssertionError(f"version {version_id} still {v.status} after {timeout} s")
        time.sleep(0.1)
