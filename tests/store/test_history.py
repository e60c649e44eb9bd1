"""The run history in a real SQLite file: idempotent recording, reads for digests, StoreHistory.

Every test opens a real database under tmp_path with ``watcher.store.db.connect`` (WAL, the
registered schema) and writes inside ``db.write``, as the daemon does.
"""

from __future__ import annotations

import dataclasses
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

from tests.helpers.records import make_metrics
from watcher.config import BaselineSpec, Check, Condition
from watcher.records import Finding, RunFile, Severity, Status, Verdict, run_time
from watcher.rules.judge import judge
from watcher.store import db
from watcher.store.history import (
    StoreHistory,
    recent_runs,
    record_verdict,
    runs_between,
)

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Iterator

T0 = datetime(2026, 4, 12, 1, 0, tzinfo=UTC)
TIC = "signal.tic_median"


@pytest.fixture
def conn(tmp_path: Path) -> Iterator[sqlite3.Connection]:
    connection = db.connect(tmp_path / "state")
    yield connection
    connection.close()


def verdict(
    name: str,
    *,
    at: datetime | None = T0,
    tic: float | None = 1.0e6,
    status: Status = Status.OK,
    mtime_ns: int = 1_776_000_000_000_000_000,
    findings: tuple[Finding, ...] = (),
    judged_at: datetime | None = None,
    caffeine_found: bool = True,
) -> Verdict:
    run_file = RunFile(
        path=Path("/data/exports") / name, size=1234, mtime_ns=mtime_ns, sha256="ab" * 32
    )
    metrics = make_metrics(file=name, tic=tic, acquired_at=at, caffeine_found=caffeine_found)
    judged = judged_at or (at or T0) + timedelta(minutes=2)
    return Verdict(
        run_file=run_file,
        status=status,
        acquired_at=run_time(metrics, run_file, judged),
        metrics=metrics,
        findings=findings,
        judged_at=judged,
    )


def record(conn: sqlite3.Connection, v: Verdict) -> int:
    with db.write(conn):
        return record_verdict(conn, v)


def test_schema_is_created_with_wal(conn: sqlite3.Connection) -> None:
    """Opening the state database creates the runs and metrics tables in WAL mode."""
    tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert {"runs", "metrics"} <= tables
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_recording_the_same_identity_twice_keeps_one_row(conn: sqlite3.Connection) -> None:
    """record_verdict is idempotent on (path, size, mtime_ns, sha256) and returns the same id."""
    first = record(conn, verdict("QC_0001.mzML", tic=1.0e6))
    second = record(conn, verdict("QC_0001.mzML", tic=2.0e6, status=Status.WARNING))
    assert first == second
    assert conn.execute("SELECT count(*) FROM runs").fetchone()[0] == 1
    n_metrics = conn.execute("SELECT count(*) FROM metrics WHERE run_id = ?", (first,))
    assert n_metrics.fetchone()[0] == len(make_metrics().flat())
    (row,) = recent_runs(conn)
    assert row.status is Status.WARNING  # the later judgement replaced the earlier one
    assert row.metrics[TIC] == 2.0e6
    other = record(conn, verdict("QC_0001.mzML", mtime_ns=1_776_000_000_000_000_001))
    assert other != first  # a rewritten file is a new run


def test_rolled_back_write_leaves_nothing(conn: sqlite3.Connection) -> None:
    """A failure inside the caller's transaction rolls the run and its metrics back."""

    def record_then_fail() -> None:
        with db.write(conn):
            record_verdict(conn, verdict("QC_0001.mzML"))
            raise RuntimeError("alert outbox failed")

    with pytest.raises(RuntimeError):
        record_then_fail()
    assert conn.execute("SELECT count(*) FROM runs").fetchone()[0] == 0
    assert conn.execute("SELECT count(*) FROM metrics").fetchone()[0] == 0


def test_acquired_at_precedence(conn: sqlite3.Connection) -> None:
    """acquired_at: the verdict's, which is the file's own time stamp, else the file mtime."""
    explicit = T0 - timedelta(days=1)
    record(conn, dataclasses.replace(verdict("a.mzML", at=T0), acquired_at=explicit))
    record(conn, verdict("b.mzML", at=T0))
    mtime_ns = 1_776_000_000_000_000_000  # 2026-04-12T13:20:00Z (date -d @1776000000 -u)
    record(conn, verdict("c.mzML", at=None, mtime_ns=mtime_ns))
    by_name = {r.file_name: r.acquired_at for r in recent_runs(conn)}
    assert by_name["a.mzML"] == explicit
    assert by_name["b.mzML"] == T0
    assert by_name["c.mzML"] == datetime(2026, 4, 12, 13, 20, tzinfo=UTC)


def test_naive_times_are_taken_as_utc(conn: sqlite3.Connection) -> None:
    """A run time stamp without a zone is stored as UTC."""
    record(conn, verdict("QC_1.mzML", at=datetime(2026, 4, 12, 1, 0)))  # noqa: DTZ001
    assert recent_runs(conn)[0].acquired_at == T0


def test_unreadable_run_is_recorded_without_metrics(conn: sqlite3.Connection) -> None:
    """An unreadable verdict keeps its error, no metrics rows, acquired at the file mtime."""
    mtime_ns = 1_776_000_000_000_000_000  # 2026-04-12T13:20:00Z (date -d @1776000000 -u)
    run_file = RunFile(path=Path("/data/exports/QC_0413.mzML"), size=10, mtime_ns=mtime_ns)
    v = Verdict(
        run_file=run_file,
        status=Status.UNREADABLE,
        acquired_at=run_time(None, run_file, T0),
        error="QC_0413.mzML: unreadable: XML ends inside spectrum 812",
        error_kind="truncated",
    )
    run_id = record(conn, v)
    (row,) = recent_runs(conn)
    assert (row.run_id, row.status, row.metrics) == (run_id, Status.UNREADABLE, {})
    assert row.error == v.error
    assert row.acquired_at == datetime(2026, 4, 12, 13, 20, tzinfo=UTC)
    assert conn.execute("SELECT count(*) FROM metrics").fetchone()[0] == 0


def test_recent_runs_newest_judgement_first_with_findings(conn: sqlite3.Connection) -> None:
    """recent_runs returns RunRows newest first, findings and boolean metrics intact."""
    finding = Finding(
        check="QC ions",
        severity=Severity.CRITICAL,
        metric="expected_ion.caffeine.found",
        subject="expected_ion.caffeine.found",
        message="QC_2.mzML: expected ion caffeine not found",
        value=False,
        limit="is false",
    )
    for i in range(3):
        at = T0 + timedelta(hours=i)
        record(
            conn,
            verdict(
                f"QC_{i}.mzML",
                at=at,
                status=Status.CRITICAL if i == 2 else Status.OK,
                findings=(finding,) if i == 2 else (),
                caffeine_found=i != 2,
            ),
        )
    rows = recent_runs(conn, limit=2)
    assert [r.file_name for r in rows] == ["QC_2.mzML", "QC_1.mzML"]
    assert rows[0].findings == (finding,)
    assert rows[0].metrics["expected_ion.caffeine.found"] is False
    assert rows[0].path == "/data/exports/QC_2.mzML"


def test_runs_between_is_half_open(conn: sqlite3.Connection) -> None:
    """runs_between(start, end) holds runs acquired at start and before end, oldest first."""
    for i in range(5):
        record(conn, verdict(f"QC_{i}.mzML", at=T0 + timedelta(hours=6 * i)))
    day = runs_between(conn, T0 + timedelta(hours=6), T0 + timedelta(hours=18))
    assert [r.file_name for r in day] == ["QC_1.mzML", "QC_2.mzML"]


def test_store_history_series_contract(conn: sqlite3.Connection) -> None:
    """series: strictly before `before`, at most `limit` most recent, oldest first."""
    for i in range(6):
        record(conn, verdict(f"QC_{i}.mzML", at=T0 + timedelta(hours=i), tic=float(i)))
    history = StoreHistory(conn)
    points = history.series(TIC, before=T0 + timedelta(hours=4), limit=3)
    assert [p.value for p in points] == [1.0, 2.0, 3.0]
    assert points[0].status is Status.OK
    assert history.series(TIC, before=T0, limit=3) == []


def test_store_history_kind_filter_pages_past_other_runs(conn: sqlite3.Connection) -> None:
    """applies_to keeps only QC runs even when hundreds of newer sample runs sit in between."""
    with db.write(conn):
        for i in range(3):
            record_verdict(conn, verdict(f"QC_{i}.mzML", at=T0 + timedelta(minutes=i), tic=7.0))
        for i in range(450):  # more than two pages of sample runs, all newer
            record_verdict(conn, verdict(f"S{i}_x.mzML", at=T0 + timedelta(hours=1, seconds=i)))
    history = StoreHistory(conn, applies_to=("QC_*.mzML",))
    points = history.series(TIC, before=T0 + timedelta(days=1), limit=5)
    assert [p.file_name for p in points] == ["QC_0.mzML", "QC_1.mzML", "QC_2.mzML"]
    regex = StoreHistory(conn, applies_to=("re:S4\\d\\d_x\\.mzML",))
    assert len(regex.series(TIC, before=T0 + timedelta(days=1), limit=100)) == 50


def test_thirty_runs_judged_against_the_real_store(tmp_path: Path) -> None:
    """30 runs in one process, each judged with StoreHistory then recorded: a TIC collapse fires."""
    check = Check(
        name="signal collapse",
        metric=TIC,
        applies_to=("QC_*.mzML",),
        against="baseline",
        baseline=BaselineSpec(runs=20, min_runs=5),
        critical=Condition(below_ratio=0.3),
    )
    conn = db.connect(tmp_path / "state", daemon=True)
    results: dict[str, tuple[Status, tuple[Finding, ...]]] = {}
    for i in range(30):
        # QC every third run, sample runs between; the sample TIC is far lower and must not
        # enter the QC baseline.
        name = f"QC_{i:04d}.mzML" if i % 3 == 0 else f"S{i:02d}_plasma.mzML"
        tic = (1.0e6 + 2.0e4 * (i % 4)) if name.startswith("QC") else 1.0e5
        if i == 24:
            tic = 2.5e5  # 25 % of the QC baseline
        at = T0 + timedelta(minutes=20 * i)
        metrics = make_metrics(file=name, tic=tic, acquired_at=at)
        judged = judge(
            metrics, file_name=name, acquired_at=at, checks=[check], history=StoreHistory(conn)
        )
        status, findings = judged.status, judged.findings
        results[name] = (status, findings)
        v = Verdict(
            run_file=RunFile(path=tmp_path / name, size=100 + i, mtime_ns=i, sha256=f"{i:064x}"),
            status=status,
            acquired_at=at,
            metrics=metrics,
            findings=findings,
            judged_at=at,
        )
        with db.write(conn):
            record_verdict(conn, v)
    assert conn.execute("SELECT count(*) FROM runs").fetchone()[0] == 30
    fired = {name: r for name, r in results.items() if r[1]}
    assert list(fired) == ["QC_0024.mzML"]
    status, (finding,) = fired["QC_0024.mzML"]
    assert status is Status.CRITICAL
    # Runs 0, 3, ..., 21 are the 8 earlier QC runs: TIC 1.0e6 + 2e4 x (i % 4) -> 1.0, 1.06,
    # 1.04, 1.02, 1.0, 1.06, 1.04, 1.02 (x 1e6), median 1.03e6 (by hand).
    assert finding.baseline is not None
    assert finding.baseline.startswith("median 1.03 M")
    assert finding.baseline.endswith("over 8 accepted runs")
    # The critical run is not accepted: the next QC run's baseline still has 9 runs, not 10.
    row_27 = [r for r in recent_runs(conn, limit=30) if r.file_name == "QC_0027.mzML"]
    assert row_27[0].status is Status.OK
    qc_27 = StoreHistory(conn, applies_to=("QC_*.mzML",)).series(
        TIC, before=T0 + timedelta(minutes=20 * 27), limit=50
    )
    assert len(qc_27) == 9
    assert sum(p.status is Status.CRITICAL for p in qc_27) == 1
    conn.close()
    reopened = db.connect(tmp_path / "state", readonly=True)
    assert len(recent_runs(reopened, limit=100)) == 30
    reopened.close()


def test_run_time_is_acquisition_else_mtime_else_judgement() -> None:
    """One definition of a run's time for the store, the alerts and the digest."""
    judged = T0 + timedelta(hours=3)
    mtime_ns = 1_776_000_000_000_000_000  # 2026-04-12T13:20:00Z (date -d @1776000000 -u)
    with_mtime = RunFile(path=Path("/data/exports/x.mzXML"), size=1, mtime_ns=mtime_ns)
    no_stat = RunFile(path=Path("/data/exports/gone.mzML"), size=0, mtime_ns=0)
    stamped = make_metrics(file="x.mzML", acquired_at=T0)
    unstamped = make_metrics(file="x.mzXML", acquired_at=None)
    assert run_time(stamped, with_mtime, judged) == T0
    assert run_time(unstamped, with_mtime, judged) == datetime(2026, 4, 12, 13, 20, tzinfo=UTC)
    assert run_time(None, with_mtime, judged) == datetime(2026, 4, 12, 13, 20, tzinfo=UTC)
    assert run_time(None, no_stat, judged) == judged
