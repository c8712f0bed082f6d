"""Row counts of the tables an import writes, for checks that a refused input stored nothing."""

from __future__ import annotations

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.models import Annotation, Assignment, Corpus, Document, Gold, Revision, Sentence


def count_rows(db: Session) -> dict[str, int]:
    """Rows per table of everything an import can write."""
    out = {}
    for model in (Corpus, Document, Sentence, Gold, Annotation, Revision, Assignment):
        out[model.__tablename__] = db.scalar(select(func.count()).select_from(model)) or 0
    return out
