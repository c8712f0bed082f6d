"""A login storm against a real server: does ``/api/health`` stay quick meanwhile?

Usage:
    python bench/login_storm.py [--logins 50] [--wrong-share 0.5] [--rounds 1]
                                [--delay-seconds 2.0]

A fresh SQLite database in a temporary folder gets ``--logins`` annotators (the password is
hashed once with the service's own argon2 settings). A uvicorn server listens on 127.0.0.1
only. First a quiet phase: one client polls ``/api/health`` for a few seconds alone. Then the
storm: ``--logins`` threads post to ``/login`` at the same moment, a share ``--wrong-share`` of
them with a wrong password (repeated ``--rounds`` times, so the failed-login delay comes into
play from the second round on), while the same client keeps polling ``/api/health``. Prints
side by side, for the quiet phase and the storm: the health checks' count, p50, p95 and max
latency in milliseconds, the number of 5xx or failed requests, and the storm's own login
latencies. Clients and server share this machine's cores, so the figures include the clients'
own cost; read them against ``uptime``'s load, printed first.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

import httpx  # noqa: E402

from app.db import make_engine, make_sessionmaker, upgrade_to_head  # noqa: E402
from app.models import User  # noqa: E402
from app.security import hash_password  # noqa: E402
from app.settings import Settings  # noqa: E402
from tests.app.live_server import LiveServer  # noqa: E402

PASSWORD = "storm-pass-1234"
QUIET_SECONDS = 3.0


def percentile(values: list[float], share: float) -> float:
    """The nearest-rank percentile (common practice, no source)."""
    if not values:
        return float("nan")
    ordered = sorted(values)
    rank = max(0, min(len(ordered) - 1, int(round(share * len(ordered) + 0.5)) - 1))
    return ordered[rank]


class HealthPoller(threading.Thread):
    """Polls /api/health back to back, recording latencies (ms) and bad answers."""

    def __init__(self, url: str, timeout: float) -> None:
        super().__init__(daemon=True)
        self.url = url
        self.timeout = timeout
        self.latencies: list[float] = []
        self.bad = 0
        self.running = True

    def run(self) -> None:
        with httpx.Client(base_url=self.url, timeout=self.timeout) as http:
            while self.running:
                start = time.perf_counter()
                try:
                    status = http.get("/api/health").status_code
                except httpx.HTTPError:
                    status = 599
                self.latencies.append((time.perf_counter() - start) * 1000)
                if status >= 500:
                    self.bad += 1
                time.sleep(0.02)

    def take(self) -> tuple[list[float], int]:
        lat, bad = self.latencies, self.bad
        self.latencies, self.bad = [], 0
        return lat, bad


def storm(
    url: str, count: int, wrong_share: float, timeout: float
) -> tuple[list[float], int, dict[int, int]]:
    """``count`` logins released at once; returns latencies (ms), 5xx/failures, status counts."""
    barrier = threading.Barrier(count)
    latencies: list[float] = []
    statuses: dict[int, int] = {}
    lock = threading.Lock()
    wrong = int(round(count * wrong_share))

    def one(i: int) -> None:
        password = "not-the-password" if i < wrong else PASSWORD
        with httpx.Client(base_url=url, timeout=timeout) as http:
            barrier.wait()
            start = time.perf_counter()
            try:
                status = http.post(
                    "/login", data={"username": f"storm{i}", "password": password}
                ).status_code
            except httpx.HTTPError:
                status = 599
            took = (time.perf_counter() - start) * 1000
        with lock:
            latencies.append(took)
            statuses[status] = statuses.get(status, 0) + 1

    threads = [threading.Thread(target=one, args=(i,)) for i in range(count)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    bad = sum(n for s, n in statuses.items() if s >= 500)
    return latencies, bad, statuses


def row(name: str, lat: list[float], bad: int) -> str:
    return (
        f"{name:<22}{len(lat):>7}{statistics.median(lat) if lat else float('nan'):>10.1f}"
        f"{percentile(lat, 0.95):>10.1f}{max(lat) if lat else float('nan'):>10.1f}{bad:>6}"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--logins", type=int, default=50)
    ap.add_argument("--wrong-share", type=float, default=0.5)
    ap.add_argument("--rounds", type=int, default=1)
    ap.add_argument("--delay-seconds", type=float, default=2.0)
    ap.add_argument(
        "--timeout",
        type=float,
        default=60.0,
        help="seconds a client waits for an answer before counting it failed",
    )
    args = ap.parse_args()
    print("load:", os.getloadavg())
    with tempfile.TemporaryDirectory() as tmp:
        settings = Settings(
            data_dir=Path(tmp), secret_key="storm-secret", login_delay_seconds=args.delay_seconds
        )
        upgrade_to_head(settings)
        engine = make_engine(settings)
        hashed = hash_password(PASSWORD)
        with make_sessionmaker(engine)() as db:
            db.add_all(
                User(
                    username=f"storm{i}",
                    display_name=f"Storm {i}",
                    role="annotator",
                    password_hash=hashed,
                )
                for i in range(args.logins)
            )
            db.commit()
        engine.dispose()
        with LiveServer(settings) as server:
            poller = HealthPoller(server.url, args.timeout)
            poller.start()
            time.sleep(QUIET_SECONDS)
            quiet, quiet_bad = poller.take()
            logins: list[float] = []
            login_bad = 0
            statuses: dict[int, int] = {}
            for _ in range(args.rounds):
                lat, bad, st = storm(server.url, args.logins, args.wrong_share, args.timeout)
                logins += lat
                login_bad += bad
                for s, n in st.items():
                    statuses[s] = statuses.get(s, 0) + n
            during, during_bad = poller.take()
            poller.running = False
            poller.join()
    print(
        f"{args.logins} simultaneous logins x {args.rounds} round(s), "
        f"{args.wrong_share:.0%} wrong; login answers: {dict(sorted(statuses.items()))}"
    )
    print(f"{'':<22}{'count':>7}{'p50 ms':>10}{'p95 ms':>10}{'max ms':>10}{'5xx':>6}")
    print(row("health, quiet", quiet, quiet_bad))
    print(row("health, during storm", during, during_bad))
    print(row("logins", logins, login_bad))
    p95_q, p95_s = percentile(quiet, 0.95), percentile(during, 0.95)
    print(f"health_p95_storm_over_quiet={p95_s / p95_q if p95_q else float('nan'):.1f}")


if __name__ == "__main__":
    main()
