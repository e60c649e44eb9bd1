"""Daemon helpers that need no process: active hours for the heartbeat, the state folder."""

from __future__ import annotations

from datetime import datetime, time
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from watcher.config import Config, state_dir_of
from watcher.daemon.norun_alert import in_active_hours


def _at(text: str, tz: str = "Europe/Oslo") -> float:
    return datetime.fromisoformat(text).replace(tzinfo=ZoneInfo(tz)).timestamp()


@pytest.mark.parametrize(
    ("local", "hours", "expected"),
    [
        ("2026-12-01T19:00", ("18:00", "08:00"), True),  # overnight window, evening
        ("2026-12-02T03:00", ("18:00", "08:00"), True),  # overnight window, small hours
        ("2026-12-02T12:00", ("18:00", "08:00"), False),
        ("2026-12-02T08:00", ("18:00", "08:00"), False),  # end is exclusive
        ("2026-12-02T09:30", ("09:00", "17:00"), True),
        ("2026-12-02T17:30", ("09:00", "17:00"), False),
    ],
)
def test_active_hours_in_instrument_time(local, hours, expected):
    """The heartbeat window is read in the instrument's time zone and may wrap midnight."""
    window = tuple(time.fromisoformat(t) for t in hours)
    assert in_active_hours(_at(local), "Europe/Oslo", window) is expected  # type: ignore[arg-type]


def test_no_window_means_always():
    """Without active_hours the heartbeat watches around the clock."""
    assert in_active_hours(0.0, "UTC", None) is True


def test_state_dir_default_beside_config(tmp_path):
    """state_dir from the config wins; otherwise state/ beside the config file."""
    assert state_dir_of(Config(state_dir=Path("/var/lib/x"))) == Path("/var/lib/x")
    assert state_dir_of(Config(source=tmp_path / "lab.yaml")) == tmp_path / "state"
