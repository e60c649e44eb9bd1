"""The daemon in-process on real folders and a real SQLite file: what survives a restart."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import synth
from watcher import config as config_mod
from watcher.daemon.main import Daemon


def write_config(root: Path, **overrides: Any) -> Path:
    """A JSON (hence YAML) config watching ``root/exports`` with its state in ``root/state``."""
    (root / "exports").mkdir(exist_ok=True)
    cfg: dict[str, Any] = {
        "instrument": {"name": "Kestrel-2 Q-TOF", "timezone": "UTC"},
        "watch": {"folders": [str(root / "exports")], "settle_s": 0.2, "rescan_interval_s": 600},
        "state_dir": str(root / "state"),
        "calibrants": [{"name": "siloxane-445", "mz": 445.120025, "search_ppm": 30}],
        "checks": [
            {
                "name": "calibration drift",
                "metric": "calibrant.*.median_ppm",
                "warning": {"outside": [-3, 3]},
            }
        ],
    }
    cfg.update(overrides)
    path = root / "lab.yaml"
    path.write_text(json.dumps(cfg, indent=1))
    return path


def run_lines(health_dir: Path) -> list[str]:
    """The raw text of every run record in the health log, oldest file first."""
    out: list[str] = []
    for path in sorted(health_dir.glob("health-*.jsonl")):
        out += [line for line in path.read_text().splitlines() if '"type": "run"' in line]
    return out


def test_health_line_replayed_after_a_restart_is_the_same_line(tmp_path: Path) -> None:
    """A kill after the commit but before the health line: the next start writes it, and it is
    the line the first daemon wrote (rebuilt from the runs table, no pickled verdict)."""
    config = config_mod.load(write_config(tmp_path))
    spec = synth.RunSpec(duration_s=10, ms2_per_cycle=0, background_peaks=20, seed=7)
    synth.write_mzml(tmp_path / "exports" / "QC_001.mzML", spec, indexed=False)
    first = Daemon(config)
    first.start()
    try:
        assert first.wait_idle(60.0)
    finally:
        first.close()
    health = tmp_path / "state" / "health"
    before = run_lines(health)
    assert len(before) == 1
    assert json.loads(before[0])["file"] == "QC_001.mzML"
    for path in health.glob("health-*.jsonl"):
        path.unlink()  # as if killed between the commit and the line
    second = Daemon(config)
    second.start()
    second.close()
    assert run_lines(health) == before
    third = Daemon(config)  # the line is there now: a further start adds no second one
    third.start()
    third.close()
    assert run_lines(health) == before
