"""Vendor-run benchmark: complete-to-health-log latency of a run folder through the converter,
against the same mzML dropped as a file.

Runs ``python -m watcher run`` as a real subprocess. Each vendor run is a folder ``QC_nnn.d``
holding the mzML plus a few MB of other files, built under a hidden name and renamed in (the
moment it is complete); the converter is ``/bin/cp`` copying the mzML out of it, so the time is
the daemon's own cost: the tree stat while settling, the tree hash, starting the converter, and
measuring the copy. The same runs are then dropped as plain ``.mzML`` files.

Usage: ``.venv/bin/python bench/convert_bench.py [--runs 10] [--settle-s 2]``
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

import synth  # noqa: E402

SIDE_FILES_MB = 4  # vendor folders carry method, log and raw side files besides the spectra


def _config(root: Path, settle_s: float) -> Path:
    cfg = {
        "instrument": {"name": "Kestrel-2 Q-TOF", "timezone": "UTC"},
        "watch": {"folders": [str(root / "exports")], "settle_s": settle_s},
        "state_dir": str(root / "state"),
        "calibrants": [{"name": "siloxane-445", "mz": 445.120025, "search_ppm": 30}],
        "convert": {
            "patterns": ["*.d"],
            "command": [shutil.which("cp") or "/bin/cp", "{input}/run.mzML", "{output_dir}/"],
            "timeout_s": 300,
        },
    }
    path = root / "lab.yaml"
    path.write_text(json.dumps(cfg))
    return path


def _wait(predicate, timeout_s: float, what: str, poll_s: float = 0.01):  # type: ignore[no-untyped-def]
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if predicate():
            return
        time.sleep(poll_s)
    raise SystemExit(f"timed out waiting for {what}")


def _health_has(root: Path, name: str) -> bool:
    needle = f'"file": "{name}"'.encode()
    return any(needle in p.read_bytes() for p in (root / "state" / "health").glob("health-*.jsonl"))


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--runs", type=int, default=10)
    parser.add_argument("--settle-s", type=float, default=2.0)
    args = parser.parse_args()
    root = Path(tempfile.mkdtemp(prefix="ionwarden-convert-bench-"))
    exports = root / "exports"
    exports.mkdir()
    template = root / "template.mzML"
    synth.write_mzml(
        template,
        synth.RunSpec(duration_s=60, ms2_per_cycle=1, background_peaks=50, seed=5),
        indexed=True,
    )
    log = (root / "daemon.log").open("ab")
    proc = subprocess.Popen(
        [sys.executable, "-m", "watcher", "run", "-c", str(_config(root, args.settle_s))],
        env=dict(os.environ, PYTHONPATH=str(REPO)),
        stdout=log,
        stderr=subprocess.STDOUT,
        cwd=root,
    )
    _wait(lambda: b"daemon.ready" in (root / "daemon.log").read_bytes(), 60, "ready")
    folder_s: list[float] = []
    file_s: list[float] = []
    data = template.read_bytes()
    for i in range(args.runs):
        name = f"QC_{i:03d}.d"
        staging = exports / f".{name}.part"
        (staging / "AcqData").mkdir(parents=True)
        (staging / "run.mzML").write_bytes(data.replace(b"?>", b"?>\n<!-- d %d -->" % i, 1))
        (staging / "AcqData" / "side.bin").write_bytes(os.urandom(SIDE_FILES_MB << 20))
        os.rename(staging, exports / name)
        done = time.monotonic()
        _wait(lambda n=name: _health_has(root, n), 120, f"health line of {name}")
        folder_s.append(time.monotonic() - done)
        plain = f"QC_{i:03d}.mzML"
        part = exports / f".{plain}.part"
        part.write_bytes(data.replace(b"?>", b"?>\n<!-- f %d -->" % i, 1))
        os.rename(part, exports / plain)
        done = time.monotonic()
        _wait(lambda n=plain: _health_has(root, n), 120, f"health line of {plain}")
        file_s.append(time.monotonic() - done)
    proc.send_signal(signal.SIGTERM)
    proc.wait(timeout=30)
    converted = [
        json.loads(line)["duration_s"]
        for line in (root / "daemon.log").read_text().splitlines()
        if '"run.converted"' in line
    ]
    result = {
        "date_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "machine": f"{platform.processor() or platform.machine()}, {os.cpu_count()} CPUs",
        "load_1min": os.getloadavg()[0],
        "settle_s": args.settle_s,
        "runs": args.runs,
        "folder_latency_median_s": round(statistics.median(folder_s), 3),
        "folder_latency_max_s": round(max(folder_s), 3),
        "file_latency_median_s": round(statistics.median(file_s), 3),
        "file_latency_max_s": round(max(file_s), 3),
        "converter_median_s": round(statistics.median(converted), 3) if converted else None,
    }
    print(json.dumps(result, indent=1))
    shutil.rmtree(root, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
