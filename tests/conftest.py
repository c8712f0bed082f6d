"""Fixtures shared by all test layers: a seeded RNG whose seed is printed."""

from __future__ import annotations

import os
import random

import pytest

# Cheap argon2 parameters for every password hashed in the tests, in this process and in the
# servers it starts (a setting of the service; production keeps argon2-cffi's defaults).
os.environ.setdefault("TREEWRIGHT_PASSWORD_HASH_COST", "test")


@pytest.fixture
def rng(request: pytest.FixtureRequest) -> random.Random:
    seed = int(os.environ.get("TREEWRIGHT_TEST_SEED", "20261201"))
    print(f"[{request.node.name}] random seed {seed} (set TREEWRIGHT_TEST_SEED to change)")
    return random.Random(seed)


def pytest_configure(config: pytest.Config) -> None:
    # numba keeps compiled kernels in one folder that every worker of this run (and the next
    # run) shares, instead of each worker compiling its own from an empty cache.
    cache = getattr(config, "cache", None)
    if cache is not None:
        os.environ.setdefault("NUMBA_CACHE_DIR", str(cache.mkdir("numba")))
    workers = getattr(config.option, "numprocesses", None)
    if workers and not hasattr(config, "workerinput"):
        # One numba thread per test worker (the workers inherit this process's environment):
        # with -n 2 on two cores each worker's parallel kernels would run two threads that
        # spin against the other worker's. Measured with tests/parser/test_reparse_gum.py
        # alone on a busy machine: 20 CPU-seconds with one thread against 45-68 with two.
        os.environ.setdefault("NUMBA_NUM_THREADS", "1")
        _warm_numba_cache()


def _warm_numba_cache() -> None:
    """Compile (or load) the chart kernels once, in the process that starts the workers, before
    they start: they then load them from the shared cache."""
    from parser.chart import parse
    from parser.grammar import Grammar

    tiny = Grammar.from_text("1.0 S -> A B\n1.0 A -> 'a'\n1.0 B -> 'b'")
    parse(tiny, ["a", "b"], k=2, posteriors=True)


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    """Run the long tests first. pytest-xdist deals tests out in collection order, so a long
    test collected last keeps one worker busy while the other has nothing left to do; started
    first, the short tests fill in around it (longest-first scheduling, common practice, no
    source). The order within each group is the collection order."""

    def weight(item: pytest.Item) -> int:
        if item.get_closest_marker("slow") is None:
            return 3 if item.get_closest_marker("browser") is None else 2
        # Among the long ones, the parser's accuracy and reference checks run longest.
        return 0 if "tests/parser/" in item.nodeid else 1

    items.sort(key=weight)
