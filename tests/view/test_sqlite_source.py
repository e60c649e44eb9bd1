"""The SQLite FloorSource: what it reads from a real store, and what it never shows."""

from __future__ import annotations

import dataclasses
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING

from tests.helpers.configs import lab_config
from tests.helpers.records import make_metrics
from watcher.records import RunFile, Status, Verdict
from watcher.store import db, history
from watcher.view.sqlite_source import SqliteFloorSource, strip_paths

if TYPE_CHECKING:
    from pathlib import Path

T0 = datetime(2026, 11, 30, 18, 0, tzinfo=UTC)


def _verdict(state: Path, i: int, status: Status) -> Verdict:
    at = T0 + timedelta(minutes=20 * i)
    return Verdict(
        run_file=RunFile(path=state / f"QC_{i:03d}.mzML", size=1, mtime_ns=i, sha256=str(i)),
        status=status,
        acquired_at=at,
        metrics=None if status is Status.UNREADABLE else make_metrics(acquired_at=at),
        error="/srv/exports/QC.mzML: incomplete" if status is Status.UNREADABLE else None,
        judged_at=at,
    )


def test_counts_follow_new_and_rejudged_runs(tmp_path: Path) -> None:
    """Runs per status equal a full GROUP BY over the table (SQLite's own count) after new runs
    and after a file identity is judged again with another status, without re-reading all."""
    state = tmp_path / "state"
    conn = db.connect(state, daemon=True)
    source = SqliteFloorSource(lab_config("json://127.0.0.1:9/unused"), state)

    def group_by() -> dict[str, int]:
        out = {str(s): 0 for s in Status}
        out.update(dict(conn.execute("SELECT status, count(*) FROM runs GROUP BY status")))
        return out

    statuses = [Status.OK, Status.WARNING, Status.OK, Status.CRITICAL, Status.UNREADABLE]
    with db.write(conn):
        for i, status in enumerate(statuses):
            history.record_verdict(conn, _verdict(state, i, status))
    assert source.instruments()[0].runs_by_status == group_by()
    with db.write(conn):
        # the same file identity as run 1, judged again a day later
        rejudged = dataclasses.replace(
            _verdict(state, 1, Status.OK), judged_at=T0 + timedelta(days=1)
        )
        history.record_verdict(conn, rejudged)
        history.record_verdict(conn, _verdict(state, 9, Status.NOTICE))
    now = source.instruments()[0]
    assert now.runs_by_status == group_by()
    assert now.runs_by_status["warning"] == 0
    conn.close()
    source.close()


def test_an_unreadable_last_run_keeps_the_last_measured_values(tmp_path: Path) -> None:
    """The last run is the unreadable one (its status and time); the values come from the
    newest run that was measured; its error shows no folder."""
    state = tmp_path / "state"
    conn = db.connect(state, daemon=True)
    with db.write(conn):
        history.record_verdict(conn, _verdict(state, 0, Status.OK))
        history.record_verdict(conn, _verdict(state, 1, Status.UNREADABLE))
    conn.close()
    now = SqliteFloorSource(lab_config("json://127.0.0.1:9/unused"), state).instruments()[0]
    assert now.last_run is not None
    assert now.last_measured is not None
    assert now.last_run.status == "unreadable"
    assert now.last_measured.file_name == "QC_000.mzML"
    assert now.last_run.error == "QC.mzML: incomplete"


def test_a_missing_or_damaged_store_is_a_note_not_an_error(tmp_path: Path) -> None:
    """No store yet: "no state yet"; a file that is no database: "store not readable now";
    neither note names a path."""
    missing = SqliteFloorSource(
        lab_config("json://127.0.0.1:9/unused"), tmp_path / "none"
    ).instruments()[0]
    assert (missing.available, missing.note) == (False, "no state yet")
    bad = tmp_path / "bad"
    bad.mkdir()
    (bad / db.DB_NAME).write_bytes(b"not a database at all" * 100)
    damaged = SqliteFloorSource(lab_config("json://127.0.0.1:9/unused"), bad).instruments()[0]
    assert damaged.available is False
    assert damaged.note is not None
    assert str(tmp_path) not in damaged.note


def test_strip_paths_keeps_file_names_only() -> None:
    """Absolute paths in an error text are cut to their last part; other text stays."""
    assert strip_paths("/srv/data/run 1/QC_1.mzML: cut") == "run 1/QC_1.mzML: cut"
    assert (
        strip_paths("/srv/data/QC_1.mzML: XML ends at byte 12") == "QC_1.mzML: XML ends at byte 12"
    )
    assert strip_paths("ratio 3/4 of scans") == "ratio 3/4 of scans"
    assert strip_paths(None) is None
