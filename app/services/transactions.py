"""The services' transaction rule, in code: a unit of work commits, a step only flushes.

Every service function that changes stored data is one of two kinds, and its docstring says
which:

* a **unit of work** ("Commits."): what one request, one CLI command or one background job
  asks for. It commits before it returns; when it raises, it has rolled back first, so nothing
  half-written stays. Most are plain functions wrapped in :func:`unit_of_work`; a few commit
  themselves because they must commit in the middle (compare-and-set saves, batches, jobs).
* a **step** ("Does not commit."): part of a larger unit (``make_gold``, ``on_submitted``,
  ``queue_if_due``...). It flushes so later steps see its rows, and never commits.

A unit made with :func:`unit_of_work` keeps its step as ``.step``, for a larger unit (an import
that creates its corpus, the demo loader) that must stay one transaction.

Routes and CLI commands never commit, roll back or query: they call units of work and read
through service functions (``tests/test_architecture.py`` checks the routes).
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from typing import Concatenate, Generic, ParamSpec, TypeVar

from sqlalchemy.orm import Session

P = ParamSpec("P")
R = TypeVar("R")


class UnitOfWork(Generic[P, R]):
    """A step run as its own transaction: commit on return, roll back on any exception."""

    def __init__(self, step: Callable[Concatenate[Session, P], R]) -> None:
        self.step = step
        functools.update_wrapper(self, step)

    def __call__(self, db: Session, /, *args: P.args, **kwargs: P.kwargs) -> R:
        try:
            result = self.step(db, *args, **kwargs)
            db.commit()
        except BaseException:
            db.rollback()
            raise
        return result


def unit_of_work(step: Callable[Concatenate[Session, P], R]) -> UnitOfWork[P, R]:
    """Decorator: the function becomes a unit of work; the undecorated one is ``.step``."""
    return UnitOfWork(step)
