"""``ionwarden note``: events on the record, and the rules starting again after a reset.

Real CLI processes on a real store: runs are judged with ``check --record`` in acquisition
order, so each run's baseline, trend state and forecast read the runs recorded before it. The
runs are synthetic with a known calibrant offset (``synth.CalibrantTruth``, exact ground truth).
"""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Any

import pytest

import synth
from tests.helpers.cli import Result, run_cli

if TYPE_CHECKING:
    from pathlib import Path

SILOXANE_MZ = 445.120025  # polysiloxane background ion [C2H6SiO]6+H+ (common practice, lock mass)
DAY = datetime(2026, 11, 27, 18, 0, tzinfo=UTC)
CHECKS = [
    {
        # the diff from the median of the last accepted runs (needs three of them)
        "name": "drift vs baseline",
        "metric": "calibrant.*.median_ppm",
        "against": "baseline",
        "baseline": {"runs": 10, "min_runs": 3},
        "warning": {"diff_outside": [-2, 2]},
    },
    {
        # a straight line through the last six runs (five at least: rules/trend.py), reaching
        # +-5 ppm within two days
        "name": "drift forecast",
        "metric": "calibrant.*.median_ppm",
        "critical": {"outside": [-5, 5]},
        "forecast": {"runs": 6, "warn_within_h": 48},
    },
]


def _lab(tmp_path: Path, name: str, **extra: Any) -> Path:
    root = tmp_path / name
    root.mkdir()
    cfg = {
        "instrument": {"name": "Kestrel-2 Q-TOF", "timezone": "Europe/Berlin"},
        "state_dir": str(root / "state"),
        "calibrants": [{"name": "siloxane-445", "mz": SILOXANE_MZ, "search_ppm": 30}],
        "checks": CHECKS,
        **extra,
    }
    path = root / "lab.yaml"
    path.write_text(json.dumps(cfg, indent=1))
    return path


def _runs(tmp_path: Path, offsets: list[float]) -> list[Path]:
    out = []
    for n, offset in enumerate(offsets, start=1):
        spec = synth.RunSpec(
            duration_s=10,
            ms2_per_cycle=0,
            background_peaks=20,
            seed=n,
            calibrants=[
                synth.CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=offset)
            ],
            start_time=DAY + timedelta(hours=n),
        )
        path = tmp_path / f"QC_{n:02d}.mzML"
        synth.write_mzml(path, spec, indexed=False)
        out.append(path)
    return out


def _cli(config: Path, *args: str | Path) -> Result:
    return run_cli(*args, "-c", config, cwd=config.parent)


def _findings(config: Path, runs: list[Path]) -> list[list[str]]:
    done = _cli(config, "check", "--record", "--json", "--no-progress", *runs)
    assert done.returncode in (0, 1), done.stderr
    return [[f["check"] for f in r["findings"]] for r in json.loads(done.stdout)["runs"]]


@pytest.mark.parametrize("how", ["flag", "config kind"])
def test_a_reset_restarts_the_baseline_from_the_runs_after_it(tmp_path: Path, how: str) -> None:
    """Three runs at +4 ppm on the old column, the column replaced, then a run at 0 ppm. Without
    a reset the new run is 4 ppm below the old baseline (a warning); after a reset there is no
    baseline yet (three runs needed), so no baseline finding."""
    runs = _runs(tmp_path, [4.0, 4.0, 4.0, 0.0])
    extra = {"reset_baselines_on": ["column"]} if how == "config kind" else {}
    reset_cfg = _lab(tmp_path, "reset", **extra)
    args = ["note", "column replaced", "--kind", "column", "--at", "2026-11-27 22:30"]
    note = _cli(reset_cfg, *args, *(["--reset-baselines"] if how == "flag" else []))
    assert note.returncode == 0, note.stderr
    assert "baselines and trends start again" in note.stdout
    kept_cfg = _lab(tmp_path, "kept")
    assert _cli(kept_cfg, *args).returncode == 0  # the same event, without a reset
    kept = _findings(kept_cfg, runs)
    reset = _findings(reset_cfg, runs)
    assert kept[3] == ["drift vs baseline"]  # the control: the old baseline judges the new run
    assert reset[3] == []
    assert kept[:3] == reset[:3]  # before the event both stores judge alike


def test_a_forecast_does_not_extrapolate_across_a_reset(tmp_path: Path) -> None:
    """+0.5 ... +2.5 ppm an hour apart, then +3.0 after a source cleaning: continued, the line
    reaches +5 ppm in 4 h (a forecast finding); after a reset the line has one run."""
    runs = _runs(tmp_path, [0.5, 1.0, 1.5, 2.0, 2.5, 3.0])
    reset_cfg, kept_cfg = _lab(tmp_path, "reset"), _lab(tmp_path, "kept")
    at = ["--kind", "source", "--at", "2026-11-28 00:30"]  # Berlin: 23:30 UTC, before run 6
    assert _cli(reset_cfg, "note", "source cleaned", *at, "--reset-baselines").returncode == 0
    assert _cli(kept_cfg, "note", "source cleaned", *at).returncode == 0
    assert "drift forecast" in _findings(kept_cfg, runs)[5]
    assert "drift forecast" not in _findings(reset_cfg, runs)[5]


def test_note_refusals(tmp_path: Path) -> None:
    cfg = _lab(tmp_path, "lab")
    future = _cli(cfg, "note", "later", "--at", "2099-01-01 00:00")
    assert future.returncode == 2
    assert "in the future" in future.stderr
    bad = _cli(cfg, "note", "x", "--at", "yesterday")
    assert bad.returncode == 2
    assert "--at" in bad.stderr
    kind = _cli(cfg, "note", "x", "--kind", "pump")
    assert kind.returncode == 2
    assert "invalid choice: 'pump'" in kind.stderr
