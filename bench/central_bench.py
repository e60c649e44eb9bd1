"""Central-store benchmark: how fast the publisher empties the queue into a real PostgreSQL
server, whether it keeps up with 50 judged runs per second, what the queue costs a run's
commit, and what a dead server costs (CPU of the publishing thread while it backs off).

A throwaway cluster is started for the run (tests/helpers/postgres.py: initdb + pg_ctl, a Unix
socket; fsync off, synchronous_commit on). Runs are written into a real local store the way
the daemon's pipeline commits them (tests/helpers/central.py): history, the alert step and the
queue in one transaction, each with the metrics of two calibrants, an expected ion and signal.

    .venv/bin/python bench/central_bench.py   # --backlog 5000 --rate 50 --rate-s 20 --dead-s 60
"""

from __future__ import annotations

import argparse
import os
import platform
import resource
import socket
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.helpers.central import LocalStore
from tests.helpers.clock import Clock
from tests.helpers.postgres import make_cluster
from tests.helpers.records import make_finding
from watcher.central import queue
from watcher.central.publish import Publisher
from watcher.config import Central
from watcher.records import Severity
from watcher.store import db


class RealClock(Clock):
    """The wall clock, with the test clock's interface (the local store advances it)."""

    def __init__(self) -> None:
        super().__init__(time.time())

    def __call__(self) -> float:
        return time.time()

    def advance(self, seconds: float) -> float:
        return time.time()


def _fill(store: LocalStore, n: int) -> list[float]:
    """``n`` runs committed as the pipeline commits them; returns each commit's seconds."""
    costs = []
    drift = make_finding(Severity.WARNING, value=3.4)
    for i in range(n):
        started = time.perf_counter()
        store.run(f"S{i:06d}.mzML", *((drift,) if i % 10 == 5 else ()), ppm=0.1 * (i % 40))
        costs.append(time.perf_counter() - started)
    return costs


def backlog(url: str, n: int) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        store = LocalStore(Path(tmp) / "state", Clock(1.79e9), "Bench-1 Q-TOF")
        _fill(store, n)
        entries = store.queued()
        publisher = Publisher(Central(url=url), store.state_dir, "Bench-1 Q-TOF")
        started = time.perf_counter()
        cpu0 = time.process_time()
        while store.queued():
            publisher.step()
        wall = time.perf_counter() - started
        cpu = time.process_time() - cpu0
        publisher.close()
        store.close()
    print(
        f"backlog: {n} runs ({entries} queue entries incl. alert changes) published in "
        f"{wall:.2f} s = {n / wall:.0f} runs/s (publisher process CPU {cpu:.2f} s)"
    )


def sustained(url: str, rate: float, seconds: float) -> None:
    """Runs committed at ``rate`` per second while the publisher thread runs, as in the daemon."""
    with tempfile.TemporaryDirectory() as tmp:
        store = LocalStore(Path(tmp) / "state", RealClock(), "Bench-2 Q-TOF")
        publisher = Publisher(Central(url=url), store.state_dir, "Bench-2 Q-TOF")
        publisher.start()
        peak = 0
        commit_s: list[float] = []
        n = int(rate * seconds)
        t0 = time.perf_counter()
        for i in range(n):
            due = t0 + i / rate
            delay = due - time.perf_counter()
            if delay > 0:
                time.sleep(delay)
            commit_s += _fill_one(store, i)
            publisher.wake()
            peak = max(peak, store.queued())
        produced = time.perf_counter() - t0
        drained_at = time.perf_counter()
        while store.queued():
            time.sleep(0.01)
        lag = time.perf_counter() - drained_at
        publisher.stop()
        store.close()
    print(
        f"sustained: {n} runs at {n / produced:.1f} runs/s for {produced:.1f} s; queue peak "
        f"{peak} entries, empty {lag:.2f} s after the last commit; run commit incl. queue: "
        f"median {statistics.median(commit_s) * 1e3:.2f} ms, "
        f"p95 {sorted(commit_s)[int(0.95 * len(commit_s))] * 1e3:.2f} ms"
    )


def _fill_one(store: LocalStore, i: int) -> list[float]:
    started = time.perf_counter()
    store.run(f"R{i:06d}.mzML", ppm=0.1 * (i % 40))
    return [time.perf_counter() - started]


def queue_cost(n: int) -> None:
    """The queue's share of a run's commit: the same runs with and without queue_judged."""
    with tempfile.TemporaryDirectory() as tmp:
        store = LocalStore(Path(tmp) / "state", Clock(1.79e9), "Bench-3 Q-TOF")
        with_queue = _fill(store, n)
        conn = store.conn
        rows = conn.execute("SELECT run_id FROM runs ORDER BY run_id").fetchall()
        started = time.perf_counter()
        for (run_id,) in rows:
            with db.write(conn):
                queue.queue_judged(conn, "Bench-3 Q-TOF", run_id, 0.0)
        only_queue = (time.perf_counter() - started) / len(rows)
        store.close()
    print(
        f"queue cost: run commit incl. queue median {statistics.median(with_queue) * 1e3:.2f} ms;"
        f" queue_judged alone in its own transaction {only_queue * 1e3:.2f} ms per run "
        f"(synchronous=FULL: one fsync)"
    )


def dead(seconds: float) -> None:
    """A publisher against a refused port: its thread's CPU over ``seconds`` of back-off."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    with tempfile.TemporaryDirectory() as tmp:
        store = LocalStore(Path(tmp) / "state", RealClock(), "Bench-4 Q-TOF")
        _fill(store, 100)
        url = f"postgresql://lab@127.0.0.1:{port}/facility"
        publisher = Publisher(Central(url=url), store.state_dir, "Bench-4 Q-TOF")
        cpu: list[float] = []

        def measured() -> None:
            before = resource.getrusage(resource.RUSAGE_THREAD)
            publisher._run()
            after = resource.getrusage(resource.RUSAGE_THREAD)
            cpu.append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)

        thread = threading.Thread(target=measured)
        thread.start()
        time.sleep(seconds)
        publisher._stop.set()
        publisher.wake()
        thread.join(10)
        attempts = publisher.attempts
        store.close()
    print(
        f"dead server: {seconds:.0f} s refused, {attempts} connection attempts, publishing "
        f"thread CPU {cpu[0]:.3f} s = {100 * cpu[0] / seconds:.3f} % of one core; 100 runs queued"
    )


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--backlog", type=int, default=5000)
    parser.add_argument("--rate", type=float, default=50.0)
    parser.add_argument("--rate-s", type=float, default=20.0)
    parser.add_argument("--dead-s", type=float, default=60.0)
    args = parser.parse_args()
    when = time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())
    load = " ".join(f"{x:.2f}" for x in os.getloadavg())
    print(f"{when}, {platform.machine()}, Python {platform.python_version()}, load {load}")
    pg = make_cluster("ionwarden-bench-pg-")
    try:
        backlog(pg.url(pg.new_database("bench")), args.backlog)
        sustained(pg.url(pg.new_database("bench")), args.rate, args.rate_s)
        queue_cost(500)
        dead(args.dead_s)
    finally:
        pg.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
