"""Build the demo: the invented Saltmarrow Ferry Cooperative corpus and three demo users.

From the files beside this module: ``gold_<stem>.ptb`` (hand-bracketed trees, one per line)
and ``raw_<stem>.txt`` (tokenized sentences, one per line) for each stem (``engine_log``,
``committee_minutes``, ``timetable_notices``). Each stem becomes one document holding its gold
trees first (gold, provenance ``import``) and then its raw sentences (queued, assigned to both
annotators). Users: an admin, an annotator and an annotator with the adjudicator role, with
passwords drawn at random on every load (they are printed once, never stored in clear).

:func:`is_demo_database` tells a demo database (safe to wipe) from a team's real one.
"""

from __future__ import annotations

import secrets
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.models import ROLE_ADJUDICATOR, ROLE_ADMIN, ROLE_ANNOTATOR, Corpus, Event, User
from app.services.assignment import assign_sentences
from app.services.corpora import create_corpus
from app.services.imports import import_bytes
from app.services.users import create_user

DEMO_DIR = Path(__file__).resolve().parent
CORPUS_NAME = "Saltmarrow Ferry Cooperative"
CORPUS_DESCRIPTION = (
    "Engine log, committee minutes and timetable notices of an invented "
    "island ferry cooperative. Every name in it is made up."
)
DEMO_EVENT = "demo_loaded"


@dataclass(frozen=True)
class DemoUser:
    username: str
    display_name: str
    role: str


DEMO_USERS = (
    DemoUser("purser", "Purser (demo admin)", ROLE_ADMIN),
    DemoUser("netmender", "Netmender (demo annotator)", ROLE_ANNOTATOR),
    DemoUser("tidewatch", "Tidewatch (demo annotator and adjudicator)", ROLE_ADJUDICATOR),
)


@dataclass
class DemoSummary:
    corpus_id: int
    documents: list[str]
    gold: int
    queued: int
    assignments: int
    logins: list[tuple[str, str, str]]  # username, role, password
    grammar: tuple[int, str, float | None] | None = None  # number, status, held-out F1


def demo_stems(folder: Path = DEMO_DIR) -> list[str]:
    """Document stems that have a gold file or a raw file, in a fixed order."""
    stems = {p.stem.removeprefix("gold_") for p in folder.glob("gold_*.ptb")}
    stems |= {p.stem.removeprefix("raw_") for p in folder.glob("raw_*.txt")}
    order = ("engine_log", "committee_minutes", "timetable_notices")
    return sorted(stems, key=lambda s: (order.index(s) if s in order else len(order), s))


def is_demo_database(db: Session) -> bool:
    """True for an empty database or one holding only what :func:`load_demo` made.

    A database counts as the demo's when the demo was loaded into it and it has no corpus
    and no user besides the demo's.
    """
    names = set(db.scalars(select(Corpus.name)))
    users = set(db.scalars(select(User.username)))
    if not names and not users:
        return True
    loaded = db.scalar(select(func.count()).select_from(Event).where(Event.kind == DEMO_EVENT)) or 0
    return bool(loaded) and names <= {CORPUS_NAME} and users <= {u.username for u in DEMO_USERS}


def load_demo(db: Session, folder: Path = DEMO_DIR, *, train: bool = True) -> DemoSummary:
    """Load the demo into an empty database and commit; returns the logins to print.

    With ``train`` the first grammar version is trained on the demo gold right away (a few
    seconds), so suggestions exist from the first page on.
    """
    logins: list[tuple[str, str, str]] = []
    people: dict[str, User] = {}
    for spec in DEMO_USERS:
        password = secrets.token_urlsafe(12)
        people[spec.role] = create_user.step(
            db, spec.username, password, spec.role, display_name=spec.display_name
        )
        logins.append((spec.username, spec.role, password))
    admin = people[ROLE_ADMIN]
    corpus = create_corpus.step(db, CORPUS_NAME, description=CORPUS_DESCRIPTION, user=admin)
    db.commit()
    documents = []
    gold = queued = 0
    for stem in demo_stems(folder):
        name = stem.replace("_", " ")
        documents.append(name)
        gold_file = folder / f"gold_{stem}.ptb"
        raw_file = folder / f"raw_{stem}.txt"
        if gold_file.exists():
            gold += import_bytes(
                db,
                gold_file.read_bytes(),
                source=gold_file.name,
                corpus_name=CORPUS_NAME,
                document_name=name,
                kind="gold",
                user=admin,
            ).imported
        if raw_file.exists():
            queued += import_bytes(
                db,
                raw_file.read_bytes(),
                source=raw_file.name,
                corpus_name=CORPUS_NAME,
                document_name=name,
                kind="text",
                user=admin,
            ).imported
    annotators = [u.username for role, u in people.items() if role != ROLE_ADMIN]
    assigned = assign_sentences.step(
        db, corpus.id, per_sentence=len(annotators), usernames=annotators, by=admin
    )
    db.add(
        Event(
            user_id=admin.id,
            kind=DEMO_EVENT,
            corpus_id=corpus.id,
            detail={"gold": gold, "queued": queued},
        )
    )
    db.commit()
    grammar = None
    if train:
        from sqlalchemy import Engine

        from app.db import make_sessionmaker
        from app.services.training import run_training

        bind = db.get_bind()
        engine = bind if isinstance(bind, Engine) else bind.engine
        version = run_training(
            make_sessionmaker(engine), corpus.id, reason="demo: first grammar", user_id=admin.id
        )
        grammar = (version.number, version.status, version.heldout_f1)
    return DemoSummary(
        corpus_id=corpus.id,
        documents=documents,
        gold=gold,
        queued=queued,
        assignments=assigned.created,
        logins=logins,
        grammar=grammar,
    )
