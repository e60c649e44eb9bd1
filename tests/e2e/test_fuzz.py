"""Fuzzed names and contents through ``check`` and the daemon: nothing crashes, nothing hangs,
every file is reported.

The expectation is the "Done when" of the issue "Nothing stops the watch": a fuzz run over file
names (random bytes, control characters, very long names, leading dashes) and file contents
(random bytes, truncations, bit flips, bombs) through ``check`` and the daemon: no crash, no hang
of the main loop longer than 2 s (systemd's watchdog pings keep coming), every file reported.
The cases come from tests/helpers/fuzz.py, seeded, so a failure reproduces.
"""

from __future__ import annotations

import json
import time
from typing import TYPE_CHECKING

import pytest

from tests.helpers.cli import run_cli
from tests.helpers.daemon import write_lab_config
from tests.helpers.fuzz import cases, write_cases
from watcher.records import shown

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.daemon import Lab

SEEDS = (11, 2026)
N_CASES = 54  # every pairing of a name kind with a content kind once
STATUSES = {"ok", "notice", "warning", "critical", "unreadable"}
# Bombs stop at a cap small enough to reach in a test (the default is 20 GB).
LIMITS = {"max_inflated_mb": 64}


def _escaped(name: str) -> str:
    """A name the way every output of the program shows it: undecodable bytes as \\xNN,
    control characters escaped (watcher.records.shown; the contract of items 1 and 9)."""
    return shown(name)


@pytest.mark.parametrize("seed", SEEDS)
def test_check_reports_every_fuzzed_file_once(tmp_path: Path, seed: int) -> None:
    """All fuzz files in one ``check --json`` (names passed after ``--``, relative, so a leading
    dash is a name and not an option): exit 1 (some are unreadable), no traceback, one entry per
    file with a status and, for unreadable ones, a one-line reason that names the file."""
    config = write_lab_config(tmp_path, limits=LIMITS)
    exports = tmp_path / "exports"
    items = cases(seed, N_CASES)
    write_cases(exports, items)
    result = run_cli(
        "check",
        "-c",
        config,
        "--json",
        "--no-progress",
        "--",
        *[c.fs_name for c in items],
        cwd=exports,
        timeout=600,
    )
    assert "Traceback" not in result.stderr, result.stderr[-3000:]
    assert result.returncode == 1, result.stderr[-3000:]
    runs = json.loads(result.stdout)["runs"]
    assert sorted(r["file"] for r in runs) == sorted(_escaped(c.fs_name) for c in items)
    by_name = {r["file"]: r for r in runs}
    for case in items:
        entry = by_name[_escaped(case.fs_name)]
        assert entry["status"] in STATUSES, (case.name_kind, case.content_kind, entry)
        if entry["status"] == "unreadable":
            reason = str(entry["error"])
            assert reason.startswith(_escaped(case.fs_name) + ": unreadable: "), reason
            assert "\n" not in reason, reason
            assert "\x1b" not in reason, reason
        if case.content_kind == "valid":
            assert entry["status"] != "unreadable", (case.name_kind, entry["error"])
        if case.content_kind in {"random-bytes", "empty", "wrong-format", "gzip-bomb"}:
            assert entry["status"] == "unreadable", (case.name_kind, case.content_kind)
        # A name is never taken for an option: nothing was recorded, no config was swapped.
    assert not (tmp_path / "state").exists() or not any((tmp_path / "state").iterdir())


@pytest.mark.slow
def test_daemon_reports_every_fuzzed_file_and_keeps_pinging(lab: Lab) -> None:
    """The same cases dropped into a running daemon's folder (renamed in, as a copy tool
    does): every file ends in the run history exactly once with a status, each unreadable one
    with its reason; the daemon's main loop pings the watchdog (every 0.1 s asked) with no gap
    of 2 s or more, and it stops cleanly on SIGTERM."""
    lab.write_config(limits=LIMITS, watch={"stall_s": 2})
    d = lab.start(env={"WATCHDOG_USEC": "200000"})
    items = cases(SEEDS[0], N_CASES)
    write_cases(lab.exports, items)
    names = sorted(c.fs_name for c in items)
    deadline = time.monotonic() + 240
    while time.monotonic() < deadline:
        d.notes()
        if sorted(lab.runs_by_name()) == names:
            break
        assert d.proc.poll() is None, d.stderr()[-3000:]
        time.sleep(0.02)
    gaps_s = d.watchdog_gaps_s()
    runs = lab.runs()
    assert d.stop() == 0, d.stderr()[-3000:]
    assert "Traceback" not in d.stderr(), d.stderr()[-3000:]
    assert lab.runs_by_name() == dict.fromkeys(names, 1), "a file missing or judged twice"
    statuses = {name: (status, error) for name, status, error in runs}
    for case in items:
        status, error = statuses[case.fs_name]
        assert status in STATUSES, (case.name_kind, case.content_kind, status)
        if case.content_kind == "valid":
            assert status != "unreadable", (case.name_kind, error)
        if status == "unreadable":
            assert error, (case.name_kind, case.content_kind)
            assert "\n" not in error, (case.name_kind, case.content_kind, error)
    assert gaps_s, "no watchdog pings"
    assert max(gaps_s) < 2.0, f"main loop stalled {max(gaps_s):.2f} s"
    # Every run is in the health log as well, with its name escaped the same way.
    logged = sorted(r["file"] for r in lab.health_runs())
    assert logged == sorted(_escaped(n) for n in names)
