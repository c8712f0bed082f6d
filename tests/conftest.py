"""Fixtures shared by all test layers: a seeded RNG whose seed is printed."""

from __future__ import annotations

import os
import random

import pytest


@pytest.fixture
def rng(request: pytest.FixtureRequest) -> random.Random:
    seed = int(os.environ.get("TREEWRIGHT_TEST_SEED", "20261201"))
    print(f"[{request.node.name}] random seed {seed} (set TREEWRIGHT_TEST_SEED to change)")
    return random.Random(seed)
