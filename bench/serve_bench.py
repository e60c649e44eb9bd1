"""Benchmark of the floor page: render times of ``ionwarden serve`` over many instruments.

Builds ``--instruments`` state databases of ``--runs`` runs each (``bench/floor_stores.py``),
starts the real ``ionwarden serve`` on them in a subprocess and times, over HTTP, the floor page
(every instrument's tile) and one instrument's page with a 30-day range (its Levey-Jennings,
TIC and ion charts as SVG, and the run table). Targets: floor under 300 ms, 30-day page under
500 ms with 20 instruments x 5,000 runs.

With ``--central`` the stores are published into a throwaway PostgreSQL cluster
(tests/helpers/postgres.py) the way the daemon publishes (the queue filled, a ``Publisher``
emptying it), and ``serve -c CONFIG --all`` is timed over the central store instead.

Usage::

    python bench/serve_bench.py                       # 20 instruments x 5,000 runs, 30 requests
    python bench/serve_bench.py --instruments 3 --runs 1000
    python bench/serve_bench.py --central             # the same pages from PostgreSQL
"""

from __future__ import annotations

import argparse
import json
import re
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from datetime import timedelta
from pathlib import Path
from urllib.parse import quote

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from bench.floor_stores import T0, build_store, end_time, write_config


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _time(url: str, n: int) -> tuple[list[float], int]:
    times_ms: list[float] = []
    size = 0
    for _ in range(n):
        t = time.perf_counter()
        with urllib.request.urlopen(url, timeout=60) as r:  # noqa: S310 - our own server
            size = len(r.read())
        times_ms.append((time.perf_counter() - t) * 1e3)
    return times_ms, size


def _publish(url: str, state: Path, name: str) -> None:
    """Every run of the store queued as the pipeline queues it, then published."""
    from watcher.central import queue
    from watcher.central.publish import Publisher
    from watcher.config import Central
    from watcher.store import db

    conn = db.connect(state, daemon=True)
    try:
        ids = [int(r[0]) for r in conn.execute("SELECT run_id FROM runs ORDER BY run_id")]
        with db.write(conn):
            for run_id in ids:
                queue.queue_judged(conn, name, run_id, time.time())
    finally:
        conn.close()
    publisher = Publisher(Central(url=url, batch_max=2000), state, name)
    try:
        while True:
            publisher.step()
            local = db.connect(state, readonly=True)
            try:
                if queue.length(local) == 0:
                    return
            finally:
                local.close()
    finally:
        publisher.close()


def _line(what: str, times_ms: list[float], size: int) -> str:
    rest = times_ms[1:] or times_ms
    return (
        f"  {what}: first {times_ms[0]:.0f} ms, then median {statistics.median(rest):.0f} ms, "
        f"p95 {float(np.percentile(rest, 95)):.0f} ms ({size // 1024} kB)"
    )


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--instruments", type=int, default=20)
    parser.add_argument("--runs", type=int, default=5000)
    parser.add_argument("--requests", type=int, default=30)
    parser.add_argument(
        "--keep", metavar="DIR", help="build the stores here once and reuse them on later runs"
    )
    parser.add_argument(
        "--central", action="store_true", help="publish the stores and serve --all from them"
    )
    args = parser.parse_args(argv)
    pg = None
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(args.keep) if args.keep else Path(tmp)
        started = time.perf_counter()
        configs = []
        for i in range(args.instruments):
            name = f"Larkfield unit {i + 1:02d}"
            base = root / f"i{i:02d}-{args.runs}"
            if not (base / "lab.yaml").exists():
                build_store(base / "state", name, args.runs, T0, seed=i)
            configs.append(write_config(base, name))
        built_s = time.perf_counter() - started
        port = _free_port()
        cmd = [sys.executable, "-m", "watcher", "serve", "--listen", f"127.0.0.1:{port}"]
        published = ""
        if args.central:
            from tests.helpers.postgres import make_cluster

            pg = make_cluster()
            url = pg.url(pg.new_database())
            started = time.perf_counter()
            for i, c in enumerate(configs):
                _publish(url, c.parent / "state", f"Larkfield unit {i + 1:02d}")
            published = f", published in {time.perf_counter() - started:.0f} s"
            first_cfg = json.loads(configs[0].read_text())
            first_cfg["central"] = {"url": url}
            central_cfg = Path(tmp) / "central.yaml"
            central_cfg.write_text(json.dumps(first_cfg))
            configs = [central_cfg]
            cmd.append("--all")
        for c in configs:
            cmd += ["-c", str(c)]
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        try:
            assert proc.stdout is not None
            line = proc.stdout.readline()
            if not re.search(r"http://", line):
                print(line + proc.stdout.read())
                return 1
            base_url = f"http://127.0.0.1:{port}"
            last = (end_time(args.runs, T0) - timedelta(minutes=1)).date()
            first = last - timedelta(days=29)
            name = quote("Larkfield unit 01", safe="")
            page = f"{base_url}/instrument/{name}?from={first}&to={last}"
            floor_ms, floor_size = _time(base_url + "/", args.requests)
            page_ms, page_size = _time(page, args.requests)
            metrics_ms, metrics_size = _time(base_url + "/metrics", args.requests)
        finally:
            proc.terminate()
            proc.wait(timeout=20)
            if pg is not None:
                pg.close()
    where = "central store" if args.central else "local stores"
    print(
        f"{args.instruments} instruments x {args.runs} runs, {where} (stores built in "
        f"{built_s:.0f} s{published}), {args.requests} requests each:"
    )
    print(_line("floor page", floor_ms, floor_size))
    print(_line(f"30-day instrument page ({first} to {last})", page_ms, page_size))
    print(_line("metrics of all instruments", metrics_ms, metrics_size))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
