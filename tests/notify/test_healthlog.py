"""Health log: daily JSON-lines files in the instrument's zone, idempotent, whole lines, pruned."""

from __future__ import annotations

import dataclasses
import json
import os
from datetime import UTC, date, datetime
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

from tests.helpers.healthlog import read_day
from tests.helpers.records import make_finding, make_verdict
from watcher.notify.digest import day_bounds
from watcher.notify.healthlog import HealthLog
from watcher.records import (
    CalibrantDrift,
    Finding,
    RunFile,
    RunMetrics,
    Severity,
    SignalMetrics,
    Status,
    Verdict,
)
from watcher.store import db, history

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.clock import Clock


def test_run_record_is_written_once_per_run_id(tmp_path: Path, clock: Clock) -> None:
    """Writing the same run_id twice, even from a new HealthLog, leaves one record."""
    verdict = make_verdict("QC_001.mzML", (make_finding(),), at_s=clock())
    assert HealthLog(tmp_path, clock=clock).write_run(verdict, 7)
    assert not HealthLog(tmp_path, clock=clock).write_run(verdict, 7)  # reads the day's file
    records = read_day(tmp_path, date(2026, 3, 10))
    assert [r["run_id"] for r in records] == [7]
    assert records[0]["type"] == "run"
    assert records[0]["status"] == "warning"
    assert records[0]["findings"][0]["check"] == "calibration drift"


def test_day_follows_instrument_time_zone(tmp_path: Path) -> None:
    """23:30 UTC on 9 March is 00:30 on 10 March in Europe/Oslo (UTC+1 in winter, IANA tzdata)."""
    at_s = datetime(2026, 3, 9, 23, 30, tzinfo=UTC).timestamp()
    log = HealthLog(tmp_path, timezone="Europe/Oslo", clock=lambda: at_s)
    log.write_run(make_verdict("S01_001.mzML", at_s=at_s), 1)
    assert (tmp_path / "health-2026-03-10.jsonl").exists()
    assert not (tmp_path / "health-2026-03-09.jsonl").exists()


def test_a_run_is_filed_under_its_acquisition_day_with_its_judging_time(
    tmp_path: Path,
) -> None:
    """Acquired 23:30 on 9 March in Europe/Oslo, judged 00:40 on 10 March: the line is in the
    9 March file (the digest's day for it, ``digest.day_bounds``) and gives both times."""
    oslo = ZoneInfo("Europe/Oslo")
    acquired = datetime(2026, 3, 9, 23, 30, tzinfo=oslo)
    judged = datetime(2026, 3, 10, 0, 40, tzinfo=oslo)
    verdict = dataclasses.replace(
        make_verdict("QC_late.mzML", at_s=judged.timestamp()), acquired_at=acquired
    )
    log = HealthLog(tmp_path, timezone="Europe/Oslo", clock=judged.timestamp)
    assert log.write_run(verdict, 1)
    (record,) = read_day(tmp_path, date(2026, 3, 9))
    assert read_day(tmp_path, date(2026, 3, 10)) == []
    assert datetime.fromisoformat(record["acquired_at"]) == acquired
    assert datetime.fromisoformat(record["judged_at"]) == judged
    start, end = day_bounds(date(2026, 3, 9), "Europe/Oslo")
    assert start <= acquired < end  # the digest of 9 March holds it too


def test_a_line_written_under_its_judging_day_is_not_written_again(tmp_path: Path) -> None:
    """A line an older version filed under the judging day (10 March) is found there: the
    replay after an upgrade does not add a second line in the acquisition day's file."""
    oslo = ZoneInfo("Europe/Oslo")
    acquired = datetime(2026, 3, 9, 23, 30, tzinfo=oslo)
    judged = datetime(2026, 3, 10, 0, 40, tzinfo=oslo)
    verdict = dataclasses.replace(
        make_verdict("QC_late.mzML", at_s=judged.timestamp()), acquired_at=acquired
    )
    HealthLog(tmp_path, timezone="Europe/Oslo").write_run(verdict, 1)
    (tmp_path / "health-2026-03-09.jsonl").rename(tmp_path / "health-2026-03-10.jsonl")
    assert not HealthLog(tmp_path, timezone="Europe/Oslo").write_run(verdict, 1)
    assert not (tmp_path / "health-2026-03-09.jsonl").exists()


def test_every_line_is_one_whole_json_record(tmp_path: Path, clock: Clock) -> None:
    """Events with newlines and non-ASCII text stay one line each."""
    log = HealthLog(tmp_path, clock=clock)
    log.write_event("daemon.started", note="line one\nline two µ", pid=12)
    log.write_event("daemon.stopped")
    lines = (tmp_path / "health-2026-03-10.jsonl").read_text().splitlines()
    assert len(lines) == 2
    first = json.loads(lines[0])
    assert first["kind"] == "daemon.started"
    assert first["fields"]["note"] == "line one\nline two µ"


def test_prune_removes_files_older_than_keep_days(tmp_path: Path, clock: Clock) -> None:
    """keep_days=2 on 10 March keeps 8-10 March and removes 7 March and older (each file last
    written at the end of its day, as the daemon leaves them)."""
    for day in ("2026-03-06", "2026-03-07", "2026-03-08", "2026-03-10"):
        path = tmp_path / f"health-{day}.jsonl"
        path.write_text("{}\n")
        written_s = datetime.fromisoformat(f"{day}T23:00:00+00:00").timestamp()
        os.utime(path, (written_s, written_s))
    (tmp_path / "notes.txt").write_text("not ours")
    removed = HealthLog(tmp_path, keep_days=2, clock=clock).prune()
    assert sorted(p.name for p in removed) == ["health-2026-03-06.jsonl", "health-2026-03-07.jsonl"]
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "health-2026-03-08.jsonl",
        "health-2026-03-10.jsonl",
        "notes.txt",
    ]


def test_an_old_days_file_written_lately_is_kept(tmp_path: Path, clock: Clock) -> None:
    """A run acquired in January, judged on 10 March, goes into the January file: the prune of
    that same day (keep_days 2) keeps it, since its last write is recent; it goes once its last
    write is older than keep_days too."""
    acquired = datetime(2026, 1, 5, 9, 0, tzinfo=UTC)
    verdict = dataclasses.replace(make_verdict("QC_old.mzML", at_s=clock()), acquired_at=acquired)
    log = HealthLog(tmp_path, keep_days=2, clock=clock)
    assert log.write_run(verdict, 1)
    path = tmp_path / "health-2026-01-05.jsonl"
    os.utime(path, (clock(), clock()))  # written "now" on the test's clock (10 March)
    assert log.prune() == []
    assert [r["file"] for r in read_day(tmp_path, date(2026, 1, 5))] == ["QC_old.mzML"]
    clock.advance(3 * 86400.0)
    assert log.prune() == [path]


def test_a_run_read_back_from_the_store_gives_the_same_line(tmp_path: Path, clock: Clock) -> None:
    """The start-up replay rebuilds a run's line from the runs table: byte for byte the line the
    fresh verdict gives, NaN and infinity included (both null, as the store keeps them)."""
    at = datetime.fromtimestamp(clock(), UTC).replace(microsecond=123456)
    signal = SignalMetrics(
        ms1_count=120,
        ms2_count=0,
        rt_start_s=0.5,
        rt_end_s=600.25,
        tic_median=float("nan"),
        bpi_median=float("inf"),
        dropouts=2,
        longest_dropout_s=None,
    )
    drift = CalibrantDrift(
        name="siloxane-445",
        mz=445.120025,
        median_ppm=3.7000000000000006,
        mad_ppm=0.1,
        p05_ppm=None,
        p95_ppm=4.2,
        found_fraction=0.95,
        median_intensity=1.5e6,
        slope_ppm_per_h=-0.3333333333333333,
    )
    finding = Finding(
        check="calibration drift",
        severity=Severity.WARNING,
        metric="calibrant.siloxane-445.median_ppm",
        subject="calibrant.siloxane-445.median_ppm",
        message="drift 3.7 ppm",
        value=3.7000000000000006,
        limit="outside [-3, 3]",
        forecast_h=12.5,
    )
    metrics = RunMetrics(
        file="QC_001.mzML", format="mzML", acquired_at=at, signal=signal, calibrants=(drift,)
    )
    run_file = RunFile(path=tmp_path / "exports" / "QC_001.mzML", size=10, mtime_ns=1, sha256="ab")
    verdict = Verdict(
        run_file=run_file,
        status=Status.WARNING,
        acquired_at=at,
        metrics=metrics,
        findings=(finding,),
        judged_at=at,
    )
    conn = db.connect(tmp_path / "state")
    with db.write(conn):
        run_id = history.record_verdict(conn, verdict)
    row = history.get_run(conn, run_id)
    conn.close()
    assert row is not None
    fresh, stored = tmp_path / "fresh", tmp_path / "stored"
    assert HealthLog(fresh, clock=clock).write_run(verdict, run_id)
    assert HealthLog(stored, clock=clock).write_stored_run(row)
    day = "health-2026-03-10.jsonl"
    line = (fresh / day).read_text()
    assert (stored / day).read_text() == line
    record = json.loads(line)
    assert record["metrics"]["signal.tic_median"] is None
    assert record["metrics"]["signal.bpi_median"] is None
    assert record["metrics"]["signal.ms1_count"] == 120
    assert record["time"] == "2026-03-10T02:00:00.123456+00:00"
