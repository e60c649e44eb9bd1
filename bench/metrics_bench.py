"""Benchmark of a Prometheus scrape: wall time of ``GET /metrics`` against a real store.

Builds a state database with ``--runs`` judged runs (``bench/floor_stores.py``), serves it with
the daemon's own endpoint (``watcher.view.metrics.MetricsServer`` on 127.0.0.1, its own thread)
and scrapes it ``--scrapes`` times over HTTP, as Prometheus would. Target: under 50 ms with
1,000 runs.

Usage::

    python bench/metrics_bench.py                 # 1,000 runs, 200 scrapes
    python bench/metrics_bench.py --runs 20000
"""

from __future__ import annotations

import argparse
import socket
import statistics
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from bench.floor_stores import T0, build_store, write_config
from watcher.config import Listen, load
from watcher.view.metrics import MetricsServer
from watcher.view.sqlite_source import SqliteFloorSource


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=1000)
    parser.add_argument("--scrapes", type=int, default=200)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        started = time.perf_counter()
        build_store(root / "state", "Larkfield Kestrel-3", args.runs, T0)
        built_s = time.perf_counter() - started
        config = load(write_config(root, "Larkfield Kestrel-3"))
        port = _free_port()
        server = MetricsServer(
            SqliteFloorSource(config, root / "state"), Listen(host="127.0.0.1", port=port)
        )
        server.start()
        url = f"http://127.0.0.1:{port}/metrics"
        times_ms: list[float] = []
        size = 0
        try:
            for _ in range(args.scrapes):
                t = time.perf_counter()
                with urllib.request.urlopen(url, timeout=10) as r:
                    size = len(r.read())
                times_ms.append((time.perf_counter() - t) * 1e3)
        finally:
            server.stop()
    first, rest = times_ms[0], times_ms[1:]
    print(f"scrape of a store with {args.runs} runs (store built in {built_s:.1f} s):")
    print(
        f"  first {first:.1f} ms (opens the store: quick_check), then median "
        f"{statistics.median(rest):.1f} ms, p95 {float(np.percentile(rest, 95)):.1f} ms, "
        f"max {max(rest):.1f} ms over {len(rest)} scrapes; {size} bytes"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
