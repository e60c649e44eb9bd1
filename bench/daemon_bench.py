"""Daemon benchmarks: file-complete-to-health-log latency, idle CPU, and a 1,000-file burst.

Runs ``python -m watcher run`` as a real subprocess on a temporary folder, exactly as systemd
would, and measures from the outside:

* slow_copy: a run written in place in chunks over ~1.5 s; seconds from its last write to its line;
* latency: a run is written as ``*.part`` and renamed into place (the moment it is complete);
  the time until its line appears in the health log, against settle_s + measuring + 1 s;
* idle CPU: user+system CPU of the daemon and its measuring child over ``--idle-s`` seconds of
  an empty folder with inotify (target under 1 % of one core);
* burst: ``--burst`` small runs dropped at once; seconds until all are judged and peak RSS
  (VmHWM) of the daemon and of its children, with one measuring child (``burst_1_worker``)
  and with ``limits.workers``' default (one child per core, at most 4); and the rate in each
  quarter of the burst, from the runs' ``judged_at`` (the first quarter shares the cores with
  the files still arriving).

Usage: ``.venv/bin/python bench/daemon_bench.py [--idle-s 60] [--burst 1000] [--latency-runs 10]``
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from datetime import datetime
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

import synth  # noqa: E402

CLK_TCK = os.sysconf("SC_CLK_TCK")


def _template(folder: Path) -> bytes:
    path = folder / "template.mzML"
    synth.write_mzml(
        path,
        synth.RunSpec(duration_s=60, ms2_per_cycle=1, background_peaks=50, seed=5),
        indexed=False,
    )
    return path.read_bytes()


def _variant(template: bytes, n: int) -> bytes:
    head, _, rest = template.partition(b"?>")
    return head + b"?>\n<!-- copy %d -->" % n + rest


# --central-url: the daemons also publish there (a dead address measures what a down central
# store costs the daemon: latency and idle CPU must stay as without it).
CENTRAL_URL: str | None = None


def _config(root: Path, settle_s: float, workers: int = 0) -> Path:
    cfg: dict[str, object] = {
        "limits": {"workers": workers},
        "instrument": {"name": "Kestrel-2 Q-TOF", "timezone": "UTC"},
        "watch": {"folders": [str(root / "exports")], "settle_s": settle_s},
        "state_dir": str(root / "state"),
        "calibrants": [{"name": "siloxane-445", "mz": 445.120025, "search_ppm": 30}],
        "checks": [
            {"name": "drift", "metric": "calibrant.*.median_ppm", "warning": {"outside": [-3, 3]}}
        ],
    }
    if CENTRAL_URL is not None:
        cfg["central"] = {"url": CENTRAL_URL}
    path = root / "lab.yaml"
    path.write_text(json.dumps(cfg))
    return path


def _start(root: Path, config: Path) -> subprocess.Popen[bytes]:
    (root / "exports").mkdir(exist_ok=True)
    env = dict(os.environ, PYTHONPATH=str(REPO))
    log = (root / "daemon.log").open("ab")
    proc = subprocess.Popen(
        [sys.executable, "-m", "watcher", "run", "-c", str(config)],
        env=env,
        stdout=log,
        stderr=subprocess.STDOUT,
        cwd=root,
    )
    _wait(lambda: b"daemon.ready" in (root / "daemon.log").read_bytes(), 60, "ready")
    return proc


def _wait(predicate, timeout_s: float, what: str, poll_s: float = 0.01):  # type: ignore[no-untyped-def]
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        value = predicate()
        if value:
            return value
        time.sleep(poll_s)
    raise SystemExit(f"timed out waiting for {what}")


def _health_files(root: Path) -> list[Path]:
    return sorted((root / "state" / "health").glob("health-*.jsonl"))


def _health_has(root: Path, name: str) -> bool:
    needle = f'"file": "{name}"'.encode()
    return any(needle in p.read_bytes() for p in _health_files(root))


def _children(pid: int) -> list[int]:
    out: list[int] = []
    for task in Path(f"/proc/{pid}/task").iterdir():
        try:
            out += [int(c) for c in (task / "children").read_text().split()]
        except OSError:
            continue
    return out


def _cpu_s(pid: int) -> float:
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    except OSError:
        return 0.0
    return (int(fields[11]) + int(fields[12])) / CLK_TCK  # utime, stime


def _hwm_mb(pid: int) -> float:
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return 0.0


def _stop(proc: subprocess.Popen[bytes]) -> None:
    proc.send_signal(signal.SIGTERM)
    proc.wait(timeout=30)


def bench_slow_copy(root: Path, template: bytes, runs: int, settle_s: float) -> dict[str, float]:
    """A run written in place in 8 chunks over ~1.5 s (a copy over a slow share): the latency
    from its last write to its health line; the target is settle_s + measuring + 1 s."""
    proc = _start(root, _config(root, settle_s))
    exports = root / "exports"
    latencies = []
    for i in range(runs):
        name = f"QC_slow_{i:03d}.mzML"
        data = _variant(template, 1000 + i)
        step = len(data) // 8 + 1
        last_write = time.monotonic()
        with (exports / name).open("wb") as out:
            for k in range(0, len(data), step):
                if k:
                    time.sleep(0.2)
                out.write(data[k : k + step])
                out.flush()
                last_write = time.monotonic()
        _wait(lambda n=name: _health_has(root, n), 60, f"health line of {name}")
        latencies.append(time.monotonic() - last_write)
    measured = [
        json.loads(line)["duration_s"]
        for line in (root / "daemon.log").read_text().splitlines()
        if '"run.measured"' in line
    ]
    _stop(proc)
    return {
        "settle_s": settle_s,
        "latency_median_s": statistics.median(latencies),
        "latency_max_s": max(latencies),
        "measure_median_s": statistics.median(measured) if measured else float("nan"),
        "target_s": settle_s + (statistics.median(measured) if measured else 0.0) + 1.0,
    }


def bench_latency(root: Path, template: bytes, runs: int, settle_s: float) -> dict[str, float]:
    proc = _start(root, _config(root, settle_s))
    exports = root / "exports"
    latencies = []
    for i in range(runs):
        name = f"QC_lat_{i:03d}.mzML"
        part = exports / (name + ".part")
        part.write_bytes(_variant(template, i))
        os.rename(part, exports / name)
        complete = time.monotonic()
        _wait(lambda n=name: _health_has(root, n), 60, f"health line of {name}")
        latencies.append(time.monotonic() - complete)
    measured = []
    for line in (root / "daemon.log").read_text().splitlines():
        if '"run.measured"' in line:
            measured.append(json.loads(line)["duration_s"])
    _stop(proc)
    return {
        "settle_s": settle_s,
        "latency_median_s": statistics.median(latencies),
        "latency_max_s": max(latencies),
        "measure_median_s": statistics.median(measured) if measured else float("nan"),
        "target_s": settle_s + (statistics.median(measured) if measured else 0.0) + 1.0,
    }


def bench_idle(root: Path, idle_s: float) -> dict[str, float]:
    proc = _start(root, _config(root, 10.0))
    time.sleep(2.0)  # let start-up work finish before the window opens
    pids = [proc.pid, *_children(proc.pid)]
    before = sum(_cpu_s(p) for p in pids)
    start = time.monotonic()
    time.sleep(idle_s)
    elapsed = time.monotonic() - start
    after = sum(_cpu_s(p) for p in pids)
    _stop(proc)
    return {
        "idle_s": elapsed,
        "cpu_s": after - before,
        "cpu_percent": 100 * (after - before) / elapsed,
    }


def bench_burst(
    root: Path, template: bytes, n: int, settle_s: float, workers: int = 0
) -> dict[str, float]:
    proc = _start(root, _config(root, settle_s, workers))
    exports = root / "exports"
    start = time.monotonic()
    for i in range(n):
        (exports / f"S{i:05d}_burst.mzML").write_bytes(_variant(template, 100000 + i))
    written = time.monotonic() - start
    db = root / "state" / "ionwarden.sqlite3"
    peak_daemon = peak_child = 0.0

    def done() -> bool:
        nonlocal peak_daemon, peak_child
        peak_daemon = max(peak_daemon, _hwm_mb(proc.pid))
        for child in _children(proc.pid):
            peak_child = max(peak_child, _hwm_mb(child))
        conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=10)
        try:
            count = conn.execute("SELECT count(*) FROM runs WHERE file_name LIKE '%_burst%'")
            return int(count.fetchone()[0]) >= n
        finally:
            conn.close()

    _wait(done, 1200, f"{n} judged runs", poll_s=0.2)
    total = time.monotonic() - start
    conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    rows = conn.execute(
        "SELECT count(*), count(DISTINCT path) FROM runs WHERE file_name LIKE '%_burst%'"
    ).fetchone()
    # The rate per quarter of the burst, from when each run was judged: the first quarter
    # shares the cores with the files still arriving, the later ones show the steady state.
    judged_s = [
        datetime.fromisoformat(row[0]).timestamp()
        for row in conn.execute(
            "SELECT judged_at FROM runs WHERE file_name LIKE '%_burst%' ORDER BY run_id"
        )
    ]
    conn.close()
    quarters = {}
    for q in range(4):
        first, last = q * (n - 1) // 4, (q + 1) * (n - 1) // 4
        span_s = judged_s[last] - judged_s[first]
        quarters[f"q{q + 1}_runs_per_s"] = (last - first) / span_s if span_s > 0 else 0.0
    _stop(proc)
    return {
        "files": n,
        "write_s": written,
        "all_judged_s": total,
        "runs_per_s": n / total,
        "rows": rows[0],
        "distinct_paths": rows[1],
        "peak_rss_daemon_mb": peak_daemon,
        "peak_rss_child_mb": peak_child,
        **quarters,
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--idle-s", type=float, default=60.0)
    parser.add_argument("--burst", type=int, default=1000)
    parser.add_argument("--latency-runs", type=int, default=10)
    parser.add_argument("--slow-copies", type=int, default=20)
    parser.add_argument("--settle-s", type=float, default=2.0)
    parser.add_argument("--central-url", help="also publish to this central store (central.url)")
    parser.add_argument("--only", help="comma-separated: latency,slow_copy,idle,burst")
    args = parser.parse_args()
    global CENTRAL_URL
    CENTRAL_URL = args.central_url
    only = set(args.only.split(",")) if args.only else None
    with tempfile.TemporaryDirectory(prefix="ionwarden-bench-") as tmp:
        base = Path(tmp)
        template = _template(base)
        print(f"run file: {len(template) / 1e3:.0f} kB synthetic mzML (60 s, MS1+MS2)")
        for name, fn in (
            ("latency", lambda r: bench_latency(r, template, args.latency_runs, args.settle_s)),
            (
                "slow_copy",
                lambda r: bench_slow_copy(r, template, args.slow_copies, args.settle_s),
            ),
            ("idle", lambda r: bench_idle(r, args.idle_s)),
            # One measuring child against limits.workers' default (the cores, at most 4).
            ("burst_1_worker", lambda r: bench_burst(r, template, args.burst, 0.5, workers=1)),
            ("burst", lambda r: bench_burst(r, template, args.burst, 0.5)),
        ):
            if only is not None and not any(name.startswith(o) for o in only):
                continue
            root = base / name
            root.mkdir()
            result = fn(root)
            shown = ", ".join(
                f"{k}={v:.3f}" if isinstance(v, float) else f"{k}={v}" for k, v in result.items()
            )
            print(f"{name}: {shown}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
