"""Store retention on a real SQLite file and real folders: job rows older than the health log's
keep_days go once their file is gone; rows of files still there, recent rows and the run history
stay."""

from __future__ import annotations

import os
import time
from datetime import UTC, datetime
from typing import TYPE_CHECKING

from tests.helpers.daemon import write_lab_config
from watcher import config as config_mod
from watcher.daemon import retention
from watcher.daemon.main import Daemon
from watcher.records import RunFile, Status, Verdict
from watcher.store import db, history, jobs

if TYPE_CHECKING:
    import sqlite3
    from pathlib import Path

NOW_S = 1_800_000_000.0  # 2027-01-15
DAY_S = 86400.0


def _finished(
    conn: sqlite3.Connection,
    path: Path,
    *,
    at_s: float,
    size: int = 5,
    mtime_ns: int = 1,
    state: jobs.JobState = jobs.JobState.DONE,
    duplicate_of: int | None = None,
) -> int:
    """A job row queued and finished at ``at_s`` (one day-old or years-old, as the test needs)."""
    job_id = jobs.enqueue(conn, path, size, mtime_ns, at_s)
    assert job_id is not None
    if state is jobs.JobState.QUEUED:
        return job_id
    conn.execute("UPDATE jobs SET state = 'measuring' WHERE id = ?", (job_id,))
    jobs.finish(conn, job_id, at_s, state=state, outcome="ok", duplicate_of=duplicate_of)
    return job_id


def _ids(conn: sqlite3.Connection) -> set[int]:
    return {r[0] for r in conn.execute("SELECT id FROM jobs")}


def test_old_rows_of_gone_files_are_pruned_and_the_rest_kept(tmp_path: Path) -> None:
    exports = tmp_path / "exports"
    exports.mkdir()
    present = exports / "QC_present.mzML"
    present.write_bytes(b"12345")
    st = present.stat()
    old_s = NOW_S - 91 * DAY_S  # past keep_days=90
    conn = db.connect(tmp_path / "state", daemon=True)
    with db.write(conn):
        gone = _finished(conn, exports / "QC_gone.mzML", at_s=old_s)
        kept_present = _finished(conn, present, at_s=old_s, mtime_ns=st.st_mtime_ns)
        changed = _finished(conn, present, at_s=old_s, size=99, mtime_ns=st.st_mtime_ns)
        recent = _finished(conn, exports / "QC_recent.mzML", at_s=NOW_S - 89 * DAY_S)
        queued = _finished(conn, exports / "QC_queued.mzML", at_s=old_s, state=jobs.JobState.QUEUED)
        failed = _finished(conn, exports / "QC_failed.mzML", at_s=old_s, state=jobs.JobState.FAILED)
        original = _finished(conn, exports / "QC_orig.mzML", at_s=old_s)
        recent_copy = _finished(
            conn, exports / "QC_copy.mzML", at_s=NOW_S - DAY_S, duplicate_of=original
        )
        old_original = _finished(conn, exports / "QC_orig2.mzML", at_s=old_s)
        old_copy = _finished(conn, exports / "QC_copy2.mzML", at_s=old_s, duplicate_of=old_original)
        run_id = history.record_verdict(
            conn,
            Verdict(
                run_file=RunFile(path=exports / "QC_gone.mzML", size=5, mtime_ns=1),
                status=Status.UNREADABLE,
                acquired_at=datetime.fromtimestamp(1e-9, UTC),
                error="truncated",
            ),
        )
    assert retention.prune_jobs(conn, [exports], 90, NOW_S) == 5
    assert _ids(conn) == {kept_present, recent, queued, original, recent_copy}
    assert not _ids(conn) & {gone, changed, failed, old_original, old_copy}
    assert history.get_run(conn, run_id) is not None  # the history is the rules' baseline
    assert retention.prune_jobs(conn, [exports], 90, NOW_S) == 0  # nothing more to do
    conn.close()


def test_nothing_is_pruned_while_a_watched_folder_is_empty_or_missing(tmp_path: Path) -> None:
    """An unmounted share looks like an empty folder: every file would seem gone."""
    exports = tmp_path / "exports"
    exports.mkdir()
    conn = db.connect(tmp_path / "state", daemon=True)
    with db.write(conn):
        _finished(conn, exports / "QC_gone.mzML", at_s=NOW_S - 200 * DAY_S)
    assert retention.prune_jobs(conn, [exports], 90, NOW_S) is None
    assert retention.prune_jobs(conn, [tmp_path / "missing"], 90, NOW_S) is None
    assert len(_ids(conn)) == 1
    (exports / "other.mzML").write_bytes(b"x")
    assert retention.prune_jobs(conn, [exports], 90, NOW_S) == 1
    conn.close()


def test_the_daemon_prunes_at_start_up_with_health_log_keep_days(tmp_path: Path) -> None:
    """keep_days from the config: a 10-day-old row of a gone file goes with keep_days 7."""
    cfg = write_lab_config(tmp_path, health_log={"keep_days": 7})
    exports = tmp_path / "exports"
    present = exports / "QC_present.mzML"
    present.write_bytes(b"12345")
    ten_days_ago_s = time.time() - 10 * DAY_S
    os.utime(present, (ten_days_ago_s, ten_days_ago_s))
    st = present.stat()
    conn = db.connect(tmp_path / "state", daemon=True)
    with db.write(conn):
        gone = _finished(conn, exports / "QC_gone.mzML", at_s=ten_days_ago_s)
        kept = _finished(
            conn, present, at_s=ten_days_ago_s, size=st.st_size, mtime_ns=st.st_mtime_ns
        )
    daemon = Daemon(config_mod.load(cfg))
    daemon.start()
    daemon.close()
    assert _ids(conn) == {kept}
    assert gone not in _ids(conn)
    conn.close()
