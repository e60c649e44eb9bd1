"""The day a run is filed under, through the real daemon: the health log and the digest agree.

A run acquired at 23:30 in the instrument's time zone (Europe/Oslo) is judged by the daemon now,
after that midnight: its health-log line is in the acquisition day's file, with the judging
time beside the acquisition time, and ``ionwarden digest --date`` of that day lists it. The
acquisition time is the file's own ``startTimeStamp`` (written by the project's generator).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

import synth
from tests.helpers.cli import run_cli
from tests.helpers.healthlog import read_day

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.daemon import Lab

SILOXANE_MZ = 445.120025  # polysiloxane background ion [C2H6SiO]6+H+ (common practice, lock mass)
OSLO = ZoneInfo("Europe/Oslo")  # UTC+1 in winter, UTC+2 in summer (IANA tzdata)


def test_a_run_acquired_at_2330_and_judged_after_midnight_is_filed_under_its_day(
    lab: Lab, tmp_path: Path
) -> None:
    """Acquired 23:30 local yesterday, judged today: in yesterday's health-log file (not
    today's), its line giving both times, and in yesterday's digest at 23:30."""
    yesterday = datetime.now(OSLO).date() - timedelta(days=1)
    acquired = datetime(yesterday.year, yesterday.month, yesterday.day, 23, 30, tzinfo=OSLO)
    spec = synth.RunSpec(
        duration_s=10,
        ms2_per_cycle=0,
        background_peaks=20,
        seed=3,
        calibrants=[synth.CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=6.0)],
        start_time=acquired.astimezone(UTC),  # the generator writes UTC ("...Z")
    )
    synth.write_mzml(tmp_path / "late.mzML", spec, indexed=False)
    lab.write_config(
        instrument={"name": "Kestrel-2 Q-TOF", "timezone": "Europe/Oslo"},
        checks=[
            {
                "name": "calibration drift",
                "metric": "calibrant.*.median_ppm",
                "critical": {"outside": [-5, 5]},
            }
        ],
    )
    d = lab.start()
    (tmp_path / "late.mzML").rename(lab.exports / "QC_late.mzML")
    lab.wait_runs(1)
    assert d.stop() == 0
    today = datetime.now(OSLO).date()
    health = lab.state / "health"
    (line,) = [r for r in read_day(health, yesterday) if r["type"] == "run"]
    assert not [r for r in read_day(health, today) if r["type"] == "run"]
    assert line["file"] == "QC_late.mzML"
    assert datetime.fromisoformat(line["acquired_at"]) == acquired
    judged = datetime.fromisoformat(line["judged_at"])
    assert judged.astimezone(OSLO).date() > yesterday  # judged after that midnight
    assert line["time"] == line["judged_at"]
    digest = run_cli(
        "digest", "-c", lab.config, "--date", yesterday.isoformat(), "--out", tmp_path / "d.html"
    )
    assert digest.returncode == 0, digest.stderr
    assert "runs: 1 " in digest.stdout
    assert "decide: 23:30 QC_late.mzML critical" in digest.stdout
    other = run_cli(
        "digest", "-c", lab.config, "--date", today.isoformat(), "--out", tmp_path / "t.html"
    )
    assert "QC_late.mzML" not in other.stdout
