"""Real state databases for the floor benchmarks: N runs per instrument, one store each.

Each run carries two calibrants, one expected ion and a TIC (``tests.helpers.records``), one run
in 40 is a warning with a finding, one in 200 is unreadable; one open alert and a delivered
message per instrument. Runs are 20 minutes apart, so 5,000 runs span about 69 days.
"""

from __future__ import annotations

import json
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.helpers.records import make_finding, make_metrics
from watcher.records import AlertState, RunFile, Severity, Status, Verdict
from watcher.store import db, history, outbox

STEP = timedelta(minutes=20)


def end_time(n_runs: int, t0: datetime) -> datetime:
    return t0 + STEP * n_runs


def build_store(state_dir: Path, name: str, n_runs: int, t0: datetime, seed: int = 0) -> None:
    """``n_runs`` judged runs of instrument ``name`` in ``state_dir`` (one transaction)."""
    rng = np.random.default_rng(seed)
    conn = db.connect(state_dir, daemon=True)
    with db.write(conn):
        for i in range(n_runs):
            at = t0 + STEP * i
            file_name = f"QC_{i:05d}.mzML"
            run_file = RunFile(path=state_dir / file_name, size=1, mtime_ns=i, sha256=str(i))
            if i % 200 == 199:
                verdict = Verdict(
                    run_file=run_file,
                    status=Status.UNREADABLE,
                    acquired_at=at,
                    error=f"{file_name}: incomplete: XML ends early",
                    judged_at=at,
                )
            else:
                ppm = float(0.4 * rng.standard_normal()) + (3.5 if i % 40 == 39 else 0.0)
                findings = (
                    (make_finding(severity=Severity.WARNING, value=ppm),) if i % 40 == 39 else ()
                )
                verdict = Verdict(
                    run_file=run_file,
                    status=Status.WARNING if findings else Status.OK,
                    acquired_at=at,
                    metrics=make_metrics(
                        file=file_name,
                        tic=float(1e6 * (1 + 0.1 * rng.standard_normal())),
                        siloxane_ppm=ppm,
                        acquired_at=at,
                    ),
                    findings=findings,
                    judged_at=at,
                )
            history.record_verdict(conn, verdict)
        outbox.save_alert(
            conn,
            instrument=name,
            check="calibration drift",
            subject="calibrant.siloxane-445.median_ppm",
            channel="chat",
            state=AlertState(
                severity=Severity.WARNING,
                raised_at_s=(t0 + STEP * n_runs).timestamp(),
                last_sent_at_s=(t0 + STEP * n_runs).timestamp(),
                finding=make_finding(severity=Severity.WARNING, value=3.6),
            ),
            run_file=f"QC_{n_runs - 1:05d}.mzML",
        )
    conn.close()


def write_config(root: Path, name: str) -> Path:
    cfg = {
        "instrument": {"name": name, "timezone": "UTC"},
        "state_dir": str(root / "state"),
        "calibrants": [{"name": "siloxane-445", "mz": 445.120025}],
        "checks": [
            {
                "name": "calibration drift",
                "metric": "calibrant.*.median_ppm",
                "warning": {"outside": [-3, 3]},
                "critical": {"outside": [-6, 6]},
            }
        ],
    }
    path = root / "lab.yaml"
    path.write_text(json.dumps(cfg))
    return path


T0 = datetime(2026, 9, 1, tzinfo=UTC)
