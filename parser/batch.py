"""Parse many sentences on every core: a process pool, each worker loading the grammar once.

What it computes: :func:`parse_many` returns one :class:`parser.chart.ParseResult` per sentence,
in input order, exactly what :func:`parser.chart.parse` returns for it. Workers are started
with ``spawn`` (safe inside threaded servers); the grammar reaches them as its saved ``.npz``
file, never pickled. Sentences go out in chunks; ``progress(done, total)`` is called after
each chunk.

Every worker ends itself as soon as the process that started the pool is gone
(:func:`watch_parent`): a parent killed mid-batch (``kill -9``, the out-of-memory killer) leaves
no workers behind holding memory, or the parent's inherited pipes open.

Complexity: the per-sentence cost of :mod:`parser.chart`, divided over ``processes`` workers,
plus a start-up of about a second per worker (imports and the compiled kernels' cache).
Limits: small batches (fewer than two chunks) run in the calling process.
"""

from __future__ import annotations

import os
import tempfile
import threading
import time
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor
from multiprocessing import get_context
from pathlib import Path
from typing import Any

from parser.chart import Constraints, ParseResult, parse, parse_family
from parser.grammar import Grammar

_WORKER_GRAMMAR: Grammar | None = None
_WORKER_FAMILY: list[Grammar] = []


#: How often a pool worker checks that the process that started it is still there (seconds).
PARENT_POLL_SECONDS = 1.0


def watch_parent(parent_pid: int, poll: float = PARENT_POLL_SECONDS) -> None:
    """In a worker process: exit as soon as the process that started it (``parent_pid``) is
    gone.

    A worker outliving a killed parent (``kill -9`` runs no shutdown) would hold memory for
    nothing, keep multiprocessing's resource tracker alive with it (the tracker exits when the
    last process holding its pipe does), and keep the parent's inherited file descriptors open
    (a reader of the parent's output then never sees its end). The worker is reparented when its
    parent dies, so a daemon thread compares ``os.getppid()`` with the parent's pid every
    ``poll`` seconds and ends the process at once (no clean-up: the work it was doing was
    the dead parent's)."""

    def watch() -> None:
        while os.getppid() == parent_pid:
            time.sleep(poll)
        os._exit(0)

    threading.Thread(target=watch, name="parent-watch", daemon=True).start()


def _init_worker(path: str | list[str], threads: int | None, parent_pid: int) -> None:
    global _WORKER_GRAMMAR, _WORKER_FAMILY
    watch_parent(parent_pid)
    if threads is not None:
        import numba

        most: int = numba.config.NUMBA_NUM_THREADS  # type: ignore[attr-defined]
        numba.set_num_threads(max(1, min(threads, most)))
    if isinstance(path, list):
        _WORKER_FAMILY = [Grammar.load(p) for p in path]
    else:
        _WORKER_GRAMMAR = Grammar.load(path)


def _parse_family_chunk(sentences: list[list[str]]) -> list[list[ParseResult]]:
    if not _WORKER_FAMILY:
        raise RuntimeError("worker started without its grammars")
    return [parse_family(_WORKER_FAMILY, words) for words in sentences]


def _parse_chunk(
    items: list[tuple[list[str], Constraints | None]], k: int, posteriors: bool
) -> list[ParseResult]:
    if _WORKER_GRAMMAR is None:
        raise RuntimeError("worker started without a grammar")
    return [
        parse(_WORKER_GRAMMAR, words, k=k, posteriors=posteriors, constraints=c)
        for words, c in items
    ]


def parse_many(
    grammar: Grammar | str | Path,
    sentences: Sequence[Sequence[str]],
    k: int = 1,
    posteriors: bool = False,
    constraints: Sequence[Constraints | None] | None = None,
    processes: int | None = None,
    progress: Callable[[int, int], None] | None = None,
    chunk: int = 16,
    threads: int | None = None,
) -> list[ParseResult]:
    """Parse ``sentences`` (token lists) with ``grammar`` (an object or a saved file).
    ``threads``: numba threads per worker process (default numba's, i.e. the cores), so
    that ``processes * threads`` can be kept to the cores."""
    total = len(sentences)
    cons = list(constraints) if constraints is not None else [None] * total
    if len(cons) != total:
        raise ValueError(f"{len(cons)} constraint sets for {total} sentences")
    items = [(list(words), c) for words, c in zip(sentences, cons, strict=True)]
    workers = processes or min(2, os.cpu_count() or 1)
    if workers <= 1 or total < 2 * chunk:
        g = grammar if isinstance(grammar, Grammar) else Grammar.load(grammar)
        out: list[ParseResult] = []
        for x, (words, c) in enumerate(items):
            out.append(parse(g, words, k=k, posteriors=posteriors, constraints=c))
            if progress is not None:
                progress(x + 1, total)
        return out
    with tempfile.TemporaryDirectory(prefix="treewright-batch-") as tmp:
        if isinstance(grammar, Grammar):
            path = str(Path(tmp) / "grammar.npz")
            grammar.save(path)
        else:
            path = str(grammar)
        calls = [(items[x : x + chunk], k, posteriors) for x in range(0, total, chunk)]
        return _in_pool(path, threads, workers, _parse_chunk, calls, total, progress)


def _in_pool(
    grammar_paths: str | list[str],
    threads: int | None,
    workers: int,
    task: Callable[..., list[Any]],
    calls: list[tuple[Any, ...]],
    total: int,
    progress: Callable[[int, int], None] | None,
) -> list[Any]:
    """``task(*call)`` of each call, in order, on ``workers`` spawned processes that load the
    grammar file(s) once; ``progress(done, total)`` after each call's results."""
    results: list[Any] = []
    with ProcessPoolExecutor(
        max_workers=workers,
        mp_context=get_context("spawn"),
        initializer=_init_worker,
        initargs=(grammar_paths, threads, os.getpid()),
    ) as pool:
        futures = [pool.submit(task, *call) for call in calls]
        for fut in futures:
            results.extend(fut.result())
            if progress is not None:
                progress(len(results), total)
    return results


def parse_family_many(
    grammars: Sequence[Grammar],
    sentences: Sequence[Sequence[str]],
    processes: int | None = None,
    progress: Callable[[int, int], None] | None = None,
    chunk: int = 16,
    threads: int | None = None,
) -> list[list[ParseResult]]:
    """:func:`parser.chart.parse_family` of every sentence (one list of results per sentence,
    one result per grammar), on ``processes`` workers that each load every grammar once: one
    pool for the whole family instead of one per grammar."""
    total = len(sentences)
    items = [list(words) for words in sentences]
    workers = processes or min(2, os.cpu_count() or 1)
    if workers <= 1 or total < 2 * chunk:
        out: list[list[ParseResult]] = []
        for words in items:
            out.append(parse_family(grammars, words))
            if progress is not None:
                progress(len(out), total)
        return out
    with tempfile.TemporaryDirectory(prefix="treewright-batch-") as tmp:
        paths = []
        for i, g in enumerate(grammars):
            paths.append(str(Path(tmp) / f"grammar{i}.npz"))
            g.save(paths[-1])
        calls = [(items[x : x + chunk],) for x in range(0, total, chunk)]
        return _in_pool(paths, threads, workers, _parse_family_chunk, calls, total, progress)
