"""After ``kill -9`` of a process parsing a batch on a pool (parser.batch), the pool's workers
and multiprocessing's resource tracker exit too: each worker watches its parent
(parser.batch.watch_parent), and the tracker ends with the last holder of its pipe. Without
that, the workers outlive the killed process, holding memory and its inherited pipes (a reader
of the killed process's output then waits for an end that never comes)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from tests.processes import HAS_PROC, alive, children

# The parent: a batch of 40 short sentences in chunks of 4 on two workers; after the first
# chunk's results it stops (sleeps) with the pool's workers alive, and is killed there.
PARENT = """
import sys, time
from nltk import Tree
from parser.batch import parse_many
from parser.grammar import train_grammar

trees = [Tree.fromstring(s) for s in (
    "(S (NP (DT the) (NN tide)) (VP (VBD turned)))",
    "(S (NP (DT the) (NN ferry)) (VP (VBD left) (NP (DT the) (NN harbour))))",
)]
g = train_grammar(trees)

def stop(done, total):
    print("ready", flush=True)
    time.sleep(600)

parse_many(g, [["the", "ferry", "turned"]] * 40, processes=2, chunk=4, progress=stop)
"""


@pytest.mark.skipif(not HAS_PROC, reason="reads /proc (Linux)")
def test_pool_workers_exit_when_the_batch_parent_is_killed() -> None:
    root = Path(__file__).resolve().parents[2]
    env = {**os.environ, "PYTHONPATH": str(root), "NUMBA_NUM_THREADS": "1"}
    proc = subprocess.Popen(
        [sys.executable, "-c", PARENT],
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
        env=env,
        start_new_session=True,  # its own group: the clean-up below reaches what is left
    )
    try:
        assert proc.stdout is not None
        assert proc.stdout.readline().strip() == "ready"
        helpers = children(proc.pid)
        assert len(helpers) >= 3, helpers  # two pool workers and the resource tracker
        os.kill(proc.pid, signal.SIGKILL)  # the parent alone, not its group
        proc.wait(timeout=30)
        deadline = time.monotonic() + 30
        while any(alive(p) for p in helpers) and time.monotonic() < deadline:
            time.sleep(0.2)
        left = [p for p in helpers if alive(p)]
        assert left == [], f"still running after their parent was killed: {left}"
        assert proc.stdout.read() == ""  # the end of its output: no child holds the pipe
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
