"""People's controls while the daemon runs: how long a command takes and until the daemon acts.

Runs ``python -m watcher run`` as a real subprocess on a temporary folder with one open alert
(a synthetic run whose calibrant sits +6 ppm off), then, ``--rounds`` times:

* ack: wall time of ``ionwarden ack`` (a new process: interpreter, imports, config, one
  ``BEGIN IMMEDIATE`` write), then seconds from its exit to its ``alert.acknowledged`` line in
  the health log, written by the daemon (target: within 1 s of the command);
* silence: ``silence add --for 1h`` then ``silence end``; seconds from the end command's exit to
  the summary row in the outbox (the same 1 s target).

Usage: ``.venv/bin/python bench/controls_bench.py [--rounds 5]``
"""

from __future__ import annotations

import argparse
import json
import sqlite3
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

SILOXANE_MZ = 445.120025


def _cli(config: Path, *args: str) -> float:
    start = time.monotonic()
    subprocess.run(
        [sys.executable, "-m", "watcher", *args, "-c", str(config)],
        check=True,
        capture_output=True,
        cwd=REPO,
    )
    return time.monotonic() - start


def _wait(predicate: object, timeout_s: float = 30.0) -> float:
    """Seconds until ``predicate()`` holds (polled every 10 ms)."""
    start = time.monotonic()
    while not predicate():  # type: ignore[operator]
        if time.monotonic() - start > timeout_s:
            raise TimeoutError("the daemon did not act in time")
        time.sleep(0.01)
    return time.monotonic() - start


def _health_count(state: Path, kind: str) -> int:
    n = 0
    for path in (state / "health").glob("health-*.jsonl"):
        for line in path.read_text().splitlines():
            if line.strip() and json.loads(line).get("kind") == kind:
                n += 1
    return n


def _summaries(state: Path) -> int:
    conn = sqlite3.connect(f"file:{state / 'ionwarden.sqlite3'}?mode=ro", uri=True, timeout=10)
    try:
        return int(
            conn.execute("SELECT count(*) FROM messages WHERE kind = 'summary'").fetchone()[0]
        )
    finally:
        conn.close()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args()
    root = Path(tempfile.mkdtemp(prefix="ionwarden-controls-bench-"))
    (root / "exports").mkdir()
    state = root / "state"
    config = root / "lab.yaml"
    config.write_text(
        json.dumps(
            {
                "instrument": {"name": "Kestrel-2 Q-TOF", "timezone": "UTC"},
                "watch": {"folders": [str(root / "exports")], "settle_s": 0.3},
                "state_dir": str(state),
                "calibrants": [{"name": "siloxane-445", "mz": SILOXANE_MZ, "search_ppm": 30}],
                "checks": [
                    {
                        "name": "calibration drift",
                        "metric": "calibrant.*.median_ppm",
                        "warning": {"outside": [-3, 3]},
                    }
                ],
                # a channel nobody listens on: the alert stays open, deliveries just fail
                "alerts": {"channels": [{"name": "lab-chat", "url": "json://127.0.0.1:9/x"}]},
            }
        )
    )
    daemon = subprocess.Popen(
        [sys.executable, "-m", "watcher", "run", "-c", str(config)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        cwd=REPO,
    )
    try:
        spec = synth.RunSpec(
            duration_s=10,
            ms2_per_cycle=0,
            background_peaks=20,
            seed=1,
            calibrants=[synth.CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=6)],
            start_time=datetime(2026, 11, 27, 18, 0, tzinfo=UTC),
        )
        part = root / "exports" / ".QC_01.mzML.part"
        synth.write_mzml(part, spec, indexed=False)
        part.rename(root / "exports" / "QC_01.mzML")
        db = state / "ionwarden.sqlite3"

        def alert_open() -> bool:
            if not db.exists():
                return False
            conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=10)
            try:
                return bool(conn.execute("SELECT count(*) FROM alert_state").fetchone()[0])
            except sqlite3.OperationalError:
                return False
            finally:
                conn.close()

        _wait(alert_open, 60)
        ack_cli, ack_seen, end_seen = [], [], []
        for _ in range(args.rounds):
            before = _health_count(state, "alert.acknowledged")
            ack_cli.append(_cli(config, "ack", "--by", "bench"))
            ack_seen.append(_wait(lambda b=before: _health_count(state, "alert.acknowledged") > b))
            _cli(config, "silence", "add", "--for", "1h", "--reason", "bench")
            done = _summaries(state)
            listed = subprocess.run(
                [sys.executable, "-m", "watcher", "silence", "list", "--json", "-c", str(config)],
                check=True,
                capture_output=True,
                text=True,
                cwd=REPO,
            )
            silence_id = json.loads(listed.stdout)["silences"][-1]["id"]
            _cli(config, "silence", "end", str(silence_id))
            end_seen.append(_wait(lambda d=done: _summaries(state) > d))
    finally:
        daemon.terminate()
        daemon.wait(timeout=20)

    def line(name: str, values: list[float]) -> str:
        return (
            f"{name}: median {statistics.median(values):.3f} s, max {max(values):.3f} s "
            f"over {len(values)}"
        )

    print(line("ack command wall time", ack_cli))
    print(line("ack exit -> health-log line", ack_seen))
    print(line("silence end exit -> summary queued", end_seen))


if __name__ == "__main__":
    main()
