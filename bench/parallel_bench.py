"""Benchmark of reading one indexed mzML in blocks on several cores (``limits.workers``).

Same files as bench/run_bench.py (generated once, cached under bench/out/). In fresh child
processes, not pinned (the point is to use the cores), best of N by wall time, it measures:

* (b)  the decoding lower bound of run_bench.py (lxml iterparse + base64 + zlib + frombuffer of
       every array), one process: the wall time the target is set against;
* (m1) ``measure_file`` with ``limits.workers: 1`` (one pass);
* (mN) ``measure_file`` with ``limits.workers: N`` (N blocks, one forked process each).

Wall and CPU are taken inside the child around the call only (imports before the timer, as in a
long-lived daemon); CPU includes the blocks' processes (RUSAGE_CHILDREN); RSS is the peak of
the largest single process (the parent's own, and the largest block's).

Usage::

    python bench/parallel_bench.py                 # the 100 MB run and the 1 GB profile run
    python bench/parallel_bench.py --quick         # the 100 MB run only
    python bench/parallel_bench.py --workers 2 --repeat 3
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from dataclasses import replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from bench.run_bench import OUT, _bench_config, generate, lower_bound, machine  # noqa: E402

FILES = ("run30.mzML", "run120p.mzML")


def child(method: str, path: Path) -> None:
    """Time one method in this fresh process and print a JSON line."""
    if method == "b":
        import numpy  # noqa: F401  (imports before the timer, as for the other methods)

        def fn() -> dict[str, Any]:
            return lower_bound(path)
    else:
        from watcher.config import Limits
        from watcher.measure.readers import cv
        from watcher.measure.run import measure_file

        cv.disable_remote()
        cv.load_cv()
        config = replace(_bench_config(), limits=Limits(workers=int(method[1:])))

        def fn() -> dict[str, Any]:
            metrics = measure_file(path, config)
            return {
                "ms1": metrics.signal.ms1_count,
                "ppm": metrics.calibrants[0].median_ppm,
                "found": sum(1 for ion in metrics.expected_ions if ion.found),
            }

    self0 = resource.getrusage(resource.RUSAGE_SELF)
    kids0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    wall0 = time.perf_counter()
    result = fn()
    wall_s = time.perf_counter() - wall0
    self1 = resource.getrusage(resource.RUSAGE_SELF)
    kids1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu_s = sum(
        getattr(b, f) - getattr(a, f)
        for a, b in ((self0, self1), (kids0, kids1))
        for f in ("ru_utime", "ru_stime")
    )
    rss_mb = max(self1.ru_maxrss, kids1.ru_maxrss) / 1024  # Linux: kilobytes
    print(json.dumps({"wall_s": wall_s, "cpu_s": cpu_s, "rss_mb": rss_mb, "result": result}))


def run_child(method: str, path: Path) -> dict[str, Any]:
    out = subprocess.run(
        [sys.executable, str(Path(__file__).resolve()), "--child", method, str(path)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        check=False,
    )
    if out.returncode != 0:
        raise RuntimeError(f"{method} on {path.name} failed: {out.stderr[-800:]}")
    data: dict[str, Any] = json.loads(out.stdout.strip().splitlines()[-1])
    return data


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="only the 100 MB run")
    parser.add_argument("--repeat", type=int, default=3, help="best of N (default 3)")
    parser.add_argument("--workers", type=int, default=2, help="blocks for mN (default 2)")
    parser.add_argument("--child", nargs=2, metavar=("METHOD", "FILE"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(args.child[0], Path(args.child[1]))
        return 0
    load_before = os.getloadavg()
    methods = ("b", "m1", f"m{args.workers}")
    rows = []
    for name in FILES[:1] if args.quick else FILES:
        path = generate(name)
        runs: dict[str, list[dict[str, Any]]] = {m: [] for m in methods}
        for _ in range(args.repeat):
            for method in methods:  # taking turns: a slow minute slows every method alike
                runs[method].append(run_child(method, path))
        best = {m: min(done, key=lambda r: r["wall_s"]) for m, done in runs.items()}
        assert best["m1"]["result"] == best[methods[2]]["result"], "blocks differ from one pass"
        b, m1, mn = best["b"], best["m1"], best[methods[2]]
        row = {"file": name, "size_mb": round(path.stat().st_size / 1e6, 1), **best}
        rows.append(row)
        print(
            f"{name} ({row['size_mb']} MB): (b) {b['wall_s']:.2f} s wall; one pass "
            f"{m1['wall_s']:.2f} s = {m1['wall_s'] / b['wall_s']:.2f} x, "
            f"{m1['cpu_s']:.2f} s CPU, {m1['rss_mb']:.0f} MB; {args.workers} blocks "
            f"{mn['wall_s']:.2f} s = {mn['wall_s'] / b['wall_s']:.2f} x (b), "
            f"{mn['cpu_s']:.2f} s CPU (+{100 * (mn['cpu_s'] / m1['cpu_s'] - 1):.0f} %), "
            f"largest process {mn['rss_mb']:.0f} MB",
            flush=True,
        )
    report = {
        "date": datetime.now(tz=UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "machine": machine(),
        "repeat": args.repeat,
        "load_1min": [round(load_before[0], 2), round(os.getloadavg()[0], 2)],
        "rows": rows,
    }
    OUT.mkdir(parents=True, exist_ok=True)
    (OUT / "parallel_results.json").write_text(json.dumps(report, indent=2))
    print(f"{report['date']}, {report['machine']}, load {report['load_1min']}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
