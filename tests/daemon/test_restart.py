"""The daemon in-process on real folders and a real SQLite file: what survives a restart."""

from __future__ import annotations

import json
from typing import TYPE_CHECKING

import synth
from tests.helpers.daemon import run_lines, write_lab_config
from watcher import config as config_mod
from watcher.daemon.main import Daemon

if TYPE_CHECKING:
    from pathlib import Path


def test_health_line_replayed_after_a_restart_is_the_same_line(tmp_path: Path) -> None:
    """A kill after the commit but before the health line: the next start writes it, and it is
    the line the first daemon wrote (rebuilt from the runs table, no pickled verdict)."""
    config = config_mod.load(write_lab_config(tmp_path))
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
