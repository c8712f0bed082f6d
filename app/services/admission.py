"""Parse admission: every parse a request asks for goes through one bounded pool per process.

What it guarantees
    * **Bounded**: at most ``slots`` parses run at once, each on ``threads`` numba threads, and
      ``slots * threads`` never exceeds the cores (by default ``threads = 1`` and ``slots`` =
      the cores: on a busy machine one thread per parse finishes sooner than two fighting for
      the same cores). The rest wait in line, first come first served (the pool's queue is a
      FIFO), and :meth:`ParseAdmission.ahead_of` tells a request how many parses are ahead.
    * **One parse per question**: requests asking the same thing (same key: grammar version,
      words, k, pins) while it is waiting or running share that one parse; its answer is kept
      in a small LRU (``cache_size``), so an identical request afterwards costs nothing.
    * **Time limit**: a request waits at most ``wait`` seconds for its answer, then gets
      :class:`ParserBusy` (HTTP 503 with ``ahead`` and ``Retry-After``). The parse goes on
      and its answer lands in the LRU, so asking again gets it at once. Requests that never
      parse (saves, pages with cached suggestions, health) never wait here.
    * **Memory back after a burst**: when the pool runs dry, the C heap is trimmed
      (``malloc_trim``, glibc only), so the charts of a burst of long parses are returned to
      the system instead of kept by the allocator.

The numba kernels release the GIL (``nogil=True`` in :mod:`parser.kernels`), so a long parse
does not stall the threads that answer other requests.

Cost: O(1) bookkeeping per request under one lock; the parse itself is what it was.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import os
import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable
from concurrent.futures import Future, ThreadPoolExecutor
from concurrent.futures import TimeoutError as FutureTimeout
from typing import Any

from app.services.errors import ServiceError

#: Longer sentences are not parsed on request (a 100-word suggestion takes seconds, a
#: 250-word one over half a minute; see bench/parse_burst.py).
DEFAULT_MAX_WORDS = 100


class ParserBusy(ServiceError):
    """The parser did not answer within the request's time limit (503); ``extra`` carries
    ``ahead`` (parses before this one when it gave up) and ``retry_after`` seconds."""

    status_code = 503


def cores() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not Linux
        return max(1, os.cpu_count() or 1)


def _trim_heap() -> None:
    name = ctypes.util.find_library("c")
    if not name:
        return
    try:
        libc = ctypes.CDLL(name)
        trim = getattr(libc, "malloc_trim", None)
        if trim is not None:
            trim(0)
    except OSError:  # another C library: nothing to trim
        return


def _set_numba_threads(threads: int) -> None:
    import numba

    most: int = numba.config.NUMBA_NUM_THREADS  # type: ignore[attr-defined]
    numba.set_num_threads(max(1, min(threads, most)))


class ParseAdmission:
    """The pool; see the module docstring. Thread-safe."""

    def __init__(
        self,
        slots: int = 0,
        threads: int = 1,
        wait: float = 20.0,
        cache_size: int = 256,
        max_words: int = DEFAULT_MAX_WORDS,
    ) -> None:
        self.max_words = max_words
        self.threads = max(1, threads)
        self.slots = slots if slots > 0 else max(1, cores() // self.threads)
        self.wait = wait
        self.cache_size = cache_size
        self._lock = threading.Lock()
        self._done: OrderedDict[Hashable, Any] = OrderedDict()
        self._inflight: dict[Hashable, Future[Any]] = {}
        self._waiting: OrderedDict[Hashable, None] = OrderedDict()  # FIFO of queued keys
        self.running = 0
        self.peak_running = 0
        self.parses = 0
        self._pool = ThreadPoolExecutor(
            max_workers=self.slots,
            thread_name_prefix="tw-parse",
            initializer=_set_numba_threads,
            initargs=(self.threads,),
        )

    # ------------------------------------------------------------------ asking
    def run(self, key: Hashable, parse: Callable[[], Any], *, wait: float | None = None) -> Any:
        """The answer of ``parse`` for ``key``: from the LRU, from the parse already asked
        for, or from a new one in line. Raises ParserBusy after ``wait`` seconds (default
        the pool's) and whatever ``parse`` raises."""
        with self._lock:
            if key in self._done:
                self._done.move_to_end(key)
                return self._done[key]
            future = self._inflight.get(key)
            if future is None:
                future = self._pool.submit(self._call, key, parse)
                self._inflight[key] = future
                self._waiting[key] = None
        limit = self.wait if wait is None else wait
        try:
            return future.result(timeout=limit)
        except FutureTimeout:
            ahead = self.ahead_of(key)
            raise ParserBusy(
                f"the parser is busy: {ahead} parse(s) ahead of this one, {self.running} "
                f"running; it goes on, and asking again in a few seconds gets its answer",
                ahead=ahead,
                retry_after=max(1, round(limit)),
            ) from None

    def cached(self, key: Hashable) -> Any | None:
        with self._lock:
            return self._done.get(key)

    def ahead_of(self, key: Hashable) -> int:
        """Parses that will run or finish before ``key``'s: the running ones and those
        waiting in front of it (0 once it runs or is done)."""
        with self._lock:
            if key not in self._waiting:
                return 0
            before = 0
            for waiting in self._waiting:
                if waiting == key:
                    break
                before += 1
            return self.running + before

    @property
    def waiting(self) -> int:
        with self._lock:
            return len(self._waiting)

    # ------------------------------------------------------------------ the pool's side
    def _call(self, key: Hashable, parse: Callable[[], Any]) -> Any:
        with self._lock:
            self._waiting.pop(key, None)
            self.running += 1
            self.peak_running = max(self.peak_running, self.running)
        try:
            result = parse()
        except BaseException:
            with self._lock:
                self._inflight.pop(key, None)
            raise
        finally:
            with self._lock:
                self.running -= 1
                idle = self.running == 0 and not self._waiting
        with self._lock:
            self.parses += 1
            self._inflight.pop(key, None)
            self._done[key] = result
            self._done.move_to_end(key)
            while len(self._done) > self.cache_size:
                self._done.popitem(last=False)
        if idle:
            _trim_heap()
        return result

    def close(self) -> None:
        self._pool.shutdown(wait=False, cancel_futures=True)


_current: ParseAdmission | None = None
_current_lock = threading.Lock()


def configure(
    slots: int = 0, threads: int = 1, wait: float = 20.0, max_words: int = DEFAULT_MAX_WORDS
) -> ParseAdmission:
    """Replace this process's pool (the app does it once at start, from its settings)."""
    global _current
    with _current_lock:
        old, _current = (
            _current,
            ParseAdmission(slots=slots, threads=threads, wait=wait, max_words=max_words),
        )
    if old is not None:
        old.close()
    return _current


def configure_from(settings: Any) -> ParseAdmission:
    """:func:`configure` from a service's settings (``parse_slots``, ``parse_threads``,
    ``parse_wait_seconds``, ``parse_max_words``): the web process, the training process and
    a queue worker bound their parses alike."""
    return configure(
        slots=settings.parse_slots,
        threads=settings.parse_threads,
        wait=settings.parse_wait_seconds,
        max_words=settings.parse_max_words,
    )


def parallel_parses() -> int:
    """Parses a background job (a suggestion refresh, held-out scoring) may run at once in
    worker processes of one numba thread each: the pool's ``slots * threads``, which the
    settings keep to the cores."""
    pool = admission()
    return max(1, pool.slots * pool.threads)


def admission() -> ParseAdmission:
    """This process's pool (made with the defaults when nobody configured one)."""
    global _current
    with _current_lock:
        if _current is None:
            _current = ParseAdmission()
        return _current
