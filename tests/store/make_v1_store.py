"""Write ``tests/data/store/ionwarden-v1.sqlite3``: a store as the last release before versioning.

Run from the repository root: ``.venv/bin/python -m tests.store.make_v1_store``. The file has the
version-1 tables (``db.SCHEMAS``, frozen) and ``user_version`` 0, as that release wrote them, with
three judged runs, a duplicate and a failed job, an open alert, a delivered message and a
stand-in for the pickled verdict the jobs table then held. It is written through a plain
connection, never ``db.connect``, which would upgrade it. The committed file is what the tests
read; re-run this only to change the fixture's content.
"""

from __future__ import annotations

import sqlite3
from datetime import UTC, datetime
from pathlib import Path

from watcher.records import (
    AlertState,
    CalibrantDrift,
    Finding,
    RunFile,
    RunMetrics,
    Severity,
    SignalMetrics,
    Status,
    Verdict,
)
from watcher.store import db, history, jobs, outbox

OUT = Path(__file__).resolve().parents[1] / "data" / "store" / "ionwarden-v1.sqlite3"
EXPORTS = Path("/data/exports")  # where the runs were; the files are not part of the fixture
FIRST_S = datetime(2026, 1, 5, 8, 0, tzinfo=UTC).timestamp()
STAND_IN_PICKLE = b"\x80\x05stand-in for a pickled Verdict"


def _verdict(name: str, at_s: float, ppm: float | None) -> Verdict:
    at = datetime.fromtimestamp(at_s, UTC)
    run_file = RunFile(path=EXPORTS / name, size=1000, mtime_ns=int(at_s * 1e9), sha256=name)
    if ppm is None:
        return Verdict(
            run_file=run_file,
            status=Status.UNREADABLE,
            acquired_at=at,
            error="truncated: the file ends inside a spectrum",
            error_kind="truncated",
            judged_at=at,
        )
    signal = SignalMetrics(
        ms1_count=300,
        ms2_count=900,
        rt_start_s=0.0,
        rt_end_s=1800.0,
        tic_median=2.5e8,
        bpi_median=4.0e7,
        dropouts=0,
        longest_dropout_s=None,
    )
    drift = CalibrantDrift(
        name="siloxane-445",
        mz=445.120025,
        median_ppm=ppm,
        mad_ppm=0.2,
        p05_ppm=ppm - 0.5,
        p95_ppm=ppm + 0.5,
        found_fraction=0.98,
        median_intensity=1.2e6,
        slope_ppm_per_h=0.1,
        scans_found=294,
    )
    metrics = RunMetrics(
        file=name, format="mzML", acquired_at=at, signal=signal, calibrants=(drift,)
    )
    findings: tuple[Finding, ...] = ()
    if abs(ppm) > 3:
        findings = (
            Finding(
                check="calibration drift",
                severity=Severity.WARNING,
                metric="calibrant.siloxane-445.median_ppm",
                subject="calibrant.siloxane-445.median_ppm",
                message=f"siloxane-445 is off by {ppm:+.1f} ppm",
                value=ppm,
                limit="outside [-3, 3]",
            ),
        )
    status = Status.WARNING if findings else Status.OK
    return Verdict(
        run_file=run_file,
        status=status,
        acquired_at=at,
        metrics=metrics,
        findings=findings,
        judged_at=at,
    )


def write(out: Path) -> None:
    out.parent.mkdir(parents=True, exist_ok=True)
    out.unlink(missing_ok=True)
    conn = sqlite3.connect(out, isolation_level=None)
    conn.row_factory = sqlite3.Row
    conn.execute("PRAGMA journal_mode = DELETE")  # one file, no -wal beside it
    db._import_table_owners()
    with db.write(conn):
        for sql in db.SCHEMAS.values():
            for statement in sql.split(";"):
                if statement.strip():
                    conn.execute(statement)
        runs = [("QC_001.mzML", 0.4), ("QC_002.mzML", 3.9), ("QC_003.mzML", None)]
        for n, (name, ppm) in enumerate(runs):
            at_s = FIRST_S + 3600 * n
            verdict = _verdict(name, at_s, ppm)
            job_id = jobs.enqueue(conn, verdict.run_file.path, 1000, int(at_s * 1e9), at_s)
            assert job_id is not None
            jobs.claim_next(conn, at_s)
            run_id = history.record_verdict(conn, verdict)
            jobs.finish(
                conn,
                job_id,
                at_s + 5,
                state=jobs.JobState.DONE,
                outcome=str(verdict.status),
                run_id=run_id,
                sha256=name,
            )
            conn.execute("UPDATE jobs SET verdict = ? WHERE id = ?", (STAND_IN_PICKLE, job_id))
            if verdict.findings:
                outbox.save_alert(
                    conn,
                    instrument="Kestrel-2 Q-TOF",
                    check="calibration drift",
                    subject=verdict.findings[0].subject,
                    channel="lab-chat",
                    state=AlertState(
                        severity=Severity.WARNING,
                        raised_at_s=at_s + 5,
                        last_sent_at_s=at_s + 5,
                        finding=verdict.findings[0],
                    ),
                    run_file=name,
                )
                message_id = outbox.enqueue(
                    conn,
                    channel="lab-chat",
                    kind="alert",
                    ref=f"run:{run_id}",
                    created_at_s=at_s + 5,
                    title="Kestrel-2 Q-TOF: warning",
                    body=verdict.findings[0].message,
                    notify_type="warning",
                )
                assert message_id is not None
                outbox.mark_delivered(conn, message_id, at_s + 6)
        twin_s = FIRST_S + 3600 * 3
        copy_id = jobs.enqueue(conn, EXPORTS / "QC_001_copy.mzML", 1000, int(twin_s * 1e9), twin_s)
        assert copy_id is not None
        jobs.claim_next(conn, twin_s)
        jobs.finish(
            conn,
            copy_id,
            twin_s + 1,
            state=jobs.JobState.DONE,
            outcome="duplicate",
            run_id=1,
            duplicate_of=1,
            sha256="QC_001.mzML",
        )
        gone_id = jobs.enqueue(conn, EXPORTS / "QC_004.mzML", 1000, 4, twin_s + 2)
        assert gone_id is not None
        jobs.claim_next(conn, twin_s + 2)
        jobs.finish(
            conn,
            gone_id,
            twin_s + 3,
            state=jobs.JobState.FAILED,
            outcome="vanished before it was measured",
        )
        jobs.set_state(conn, "heartbeat", "ok")
    conn.execute("VACUUM")
    conn.close()


if __name__ == "__main__":
    write(OUT)
    print(f"wrote {OUT} ({OUT.stat().st_size} bytes)")
