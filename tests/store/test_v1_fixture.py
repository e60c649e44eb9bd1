"""The committed version-1 store (tests/data/store/, made by tests/store/make_v1_store.py) opened
by the current code: upgraded to the current version with every row intact."""

from __future__ import annotations

import sqlite3
from datetime import UTC, datetime
from typing import TYPE_CHECKING

from tests.helpers.store import FIXTURE, copy_fixture
from watcher.records import Status
from watcher.store import db, history, jobs, outbox

if TYPE_CHECKING:
    from pathlib import Path


def test_the_fixture_is_a_pre_versioning_store() -> None:
    raw = sqlite3.connect(f"file:{FIXTURE}?mode=ro", uri=True)
    assert raw.execute("PRAGMA user_version").fetchone()[0] == 0
    assert raw.execute("SELECT count(*) FROM jobs WHERE verdict IS NOT NULL").fetchone()[0] == 3
    raw.close()


def test_version_1_store_is_upgraded_with_its_rows_intact(tmp_path: Path) -> None:
    copy_fixture(tmp_path / "state")
    conn = db.connect(tmp_path / "state", daemon=True)
    assert db.user_version(conn) == db.SCHEMA_VERSION
    runs = history.recent_runs(conn)
    assert [(r.run_id, r.file_name, r.status) for r in runs] == [
        (3, "QC_003.mzML", Status.UNREADABLE),
        (2, "QC_002.mzML", Status.WARNING),
        (1, "QC_001.mzML", Status.OK),
    ]
    assert runs[1].findings[0].value == 3.9
    assert runs[2].metrics["calibrant.siloxane-445.median_ppm"] == 0.4
    assert runs[0].error == "truncated: the file ends inside a spectrum"
    series = history.StoreHistory(conn).series(
        "calibrant.siloxane-445.median_ppm", before=datetime(2100, 1, 1, tzinfo=UTC), limit=10
    )
    assert [p.value for p in series] == [0.4, 3.9]
    assert jobs.counts(conn) == {"queued": 0, "measuring": 0, "done": 4, "failed": 1}
    copy = jobs.get(conn, 4)
    assert copy is not None
    assert (copy.outcome, copy.duplicate_of, copy.run_id) == ("duplicate", 1, 1)
    assert jobs.recent_judged(conn) == [3, 2, 1]
    assert conn.execute("SELECT count(*) FROM jobs WHERE verdict IS NOT NULL").fetchone()[0] == 0
    assert jobs.get_state(conn, "heartbeat") == "ok"
    [alert] = outbox.load_alerts(conn)
    assert (alert.check, alert.run_file, alert.state.finding.value) == (
        "calibration drift",
        "QC_002.mzML",
        3.9,
    )
    [message] = outbox.messages(conn)
    assert (message.ref, message.status) == ("run:2", outbox.DeliveryStatus.DELIVERED)
    conn.close()
    db.connect(tmp_path / "state", readonly=True).close()  # readers accept it now
