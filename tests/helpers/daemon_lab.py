"""A lab for the in-process daemon: a config over real folders, and what the health log holds."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any


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
