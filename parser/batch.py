"""Parse many sentences on every core: a process pool, each worker loading the grammar once.

What it computes: :func:`parse_many` returns one :class:`parser.chart.ParseResult` per sentence,
in input order, exactly what :func:`parser.chart.parse` returns for it. Workers are started
with ``spawn`` (safe inside threaded servers); the grammar reaches them as its saved ``.npz``
file, never pickled. Sentences go out in chunks; ``progress(done, total)`` is called after
each chunk.

Complexity: the per-sentence cost of :mod:`parser.chart`, divided over ``processes`` workers,
plus a start-up of about a second per worker (imports and the compiled kernels' cache).
Limits: small batches (fewer than two chunks) run in the calling process.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor
from multiprocessing import get_context
from pathlib import Path

from parser.chart import Constraints, ParseResult, parse
from parser.grammar import Grammar

_WORKER_GRAMMAR: Grammar | None = None


def _init_worker(path: str, threads: int | None = None) -> None:
    global _WORKER_GRAMMAR
    if threads is not None:
        import numba

        most: int = numba.config.NUMBA_NUM_THREADS  # type: ignore[attr-defined]
        numba.set_num_threads(max(1, min(threads, most)))
    _WORKER_GRAMMAR = Grammar.load(path)


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
        chunks = [items[x : x + chunk] for x in range(0, total, chunk)]
        results: list[ParseResult] = []
        with ProcessPoolExecutor(
            max_workers=workers,
            mp_context=get_context("spawn"),
            initializer=_init_worker,
            initargs=(path, threads),
        ) as pool:
            futures = [pool.submit(_parse_chunk, c, k, posteriors) for c in chunks]
            for fut in futures:
                results.extend(fut.result())
                if progress is not None:
                    progress(len(results), total)
        return results
