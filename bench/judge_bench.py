"""Benchmark of the judge with a long history: median wall time of one ``judge`` call.

Builds a real state database (in a temporary folder) holding ``--runs`` earlier QC runs, each
with a calibrant drift, a TIC and the EWMA/CUSUM states the daemon stores with a run, then
judges a new run against it with the checks a careful lab would set: limits on the baseline,
Westgard rules, EWMA, CUSUM and a forecast, on both metrics. Each call reads its history from
SQLite (``StoreHistory``), as in the daemon.

Usage::

    python bench/judge_bench.py                 # 10,000 runs of history, 200 calls
    python bench/judge_bench.py --runs 1000 --calls 50
"""

from __future__ import annotations

import argparse
import platform
import statistics
import sys
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.helpers.records import make_metrics
from watcher.config import BaselineSpec, Check, Condition, CusumSpec, EwmaSpec, ForecastSpec
from watcher.records import RunFile, Status, TrendState, Verdict
from watcher.rules.judge import judge, trend_spec
from watcher.store import db, history

T0 = datetime(2026, 1, 1, tzinfo=UTC)
CHECKS = tuple(
    Check(
        name=f"{metric} watch",
        metric=metric,
        applies_to=("QC_*",),
        against="baseline",
        warning=Condition(z_outside=(-3.0, 3.0)),
        baseline=BaselineSpec(runs=20, min_runs=5),
        westgard=("1-3s", "2-2s", "R-4s", "4-1s", "10x"),
        ewma=EwmaSpec(),
        cusum=CusumSpec(),
        forecast=ForecastSpec(),
    )
    for metric in ("calibrant.siloxane-445.median_ppm", "signal.tic_median")
)


def build(state_dir: Path, n_runs: int) -> None:
    rng = np.random.default_rng(3)
    conn = db.connect(state_dir, daemon=True)
    with db.write(conn):
        for i in range(n_runs):
            at = T0 + timedelta(minutes=20 * i)
            name = f"QC_{i:05d}.mzML"
            metrics = make_metrics(
                file=name,
                tic=float(1e6 * (1 + 0.05 * rng.standard_normal())),
                siloxane_ppm=float(0.3 * rng.standard_normal()),
                acquired_at=at,
            )
            history.record_verdict(
                conn,
                Verdict(
                    run_file=RunFile(path=state_dir / name, size=1, mtime_ns=i, sha256=str(i)),
                    status=Status.OK,
                    acquired_at=at,
                    metrics=metrics,
                    # the EWMA/CUSUM states a daemon leaves with each run (values immaterial)
                    trend_states=tuple(
                        TrendState(
                            check=c.name,
                            path=c.metric,
                            spec=trend_spec(c),
                            n_runs=i + 1,
                            ewma=0.0,
                            cusum_hi=0.0,
                            cusum_lo=0.0,
                        )
                        for c in CHECKS
                    ),
                    judged_at=at,
                ),
            )
    conn.close()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=10_000)
    parser.add_argument("--calls", type=int, default=200)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        state_dir = Path(tmp) / "state"
        started = time.perf_counter()
        build(state_dir, args.runs)
        built_s = time.perf_counter() - started
        conn = db.connect(state_dir, readonly=True)
        at = T0 + timedelta(minutes=20 * args.runs)
        metrics = make_metrics(file="QC_new.mzML", tic=1.02e6, siloxane_ppm=0.4, acquired_at=at)
        store = history.StoreHistory(conn)
        times_ms = []
        for _ in range(args.calls):
            t = time.perf_counter()
            judge(metrics, file_name="QC_new.mzML", acquired_at=at, checks=CHECKS, history=store)
            times_ms.append((time.perf_counter() - t) * 1e3)
        conn.close()
    print(f"judge with {args.runs} runs of history ({platform.machine()}, {platform.node()}):")
    print(f"  history built in {built_s:.1f} s")
    print(
        f"  median {statistics.median(times_ms):.2f} ms, "
        f"p95 {float(np.percentile(times_ms, 95)):.2f} ms over {args.calls} calls"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
