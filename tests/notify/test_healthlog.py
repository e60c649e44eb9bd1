"""Health log: daily JSON-lines files in the instrument's zone, idempotent, whole lines, pruned."""

from __future__ import annotations

import json
from datetime import UTC, date, datetime
from pathlib import Path

from tests.helpers.clock import Clock
from tests.helpers.records import make_finding, make_verdict
from watcher.notify.healthlog import HealthLog, read_day


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
    """keep_days=2 on 10 March keeps 8-10 March and removes 7 March and older."""
    for day in ("2026-03-06", "2026-03-07", "2026-03-08", "2026-03-10"):
        (tmp_path / f"health-{day}.jsonl").write_text("{}\n")
    (tmp_path / "notes.txt").write_text("not ours")
    removed = HealthLog(tmp_path, keep_days=2, clock=clock).prune()
    assert sorted(p.name for p in removed) == ["health-2026-03-06.jsonl", "health-2026-03-07.jsonl"]
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "health-2026-03-08.jsonl",
        "health-2026-03-10.jsonl",
        "notes.txt",
    ]
