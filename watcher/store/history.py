"""The run history in SQLite: each judged run, its flat metrics and findings, by file identity.

Tables (created through ``db.register_schema`` when a database is opened):

- ``runs``: one row per file identity (path, size, mtime_ns, sha256; a missing hash is stored as
  ''), with the acquisition time, judgement time, status, error and the findings and flat
  metrics as JSON.
- ``metrics``: one row per run and metric path (value REAL, NULL when not measured; booleans as
  1/0 with ``is_bool``), carrying the run's acquisition time so that a metric's series is read
  from the index on (path, acquired_at) alone.

Timestamps are UTC ISO-8601 text with microseconds (``2026-04-12T03:15:00.000000+00:00``), so text
order is time order; naive datetimes are taken as UTC. Writes happen inside the caller's
``db.write(conn)`` transaction; reads are single SELECT statements, safe inside or outside one.
Accepted runs are those with status ok or notice.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

from watcher.config import matches_applies_to
from watcher.records import Finding, HistoryPoint, Severity, Status, TrendState, Verdict, shown
from watcher.store.db import path_text, path_value, register_schema

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Sequence

SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    run_id        INTEGER PRIMARY KEY,
    path          TEXT NOT NULL,
    file_name     TEXT NOT NULL,
    size          INTEGER NOT NULL,
    mtime_ns      INTEGER NOT NULL,
    sha256        TEXT NOT NULL DEFAULT '',
    format        TEXT,
    acquired_at   TEXT NOT NULL,
    judged_at     TEXT NOT NULL,
    status        TEXT NOT NULL,
    error         TEXT,
    error_kind    TEXT,
    findings_json TEXT NOT NULL DEFAULT '[]',
    metrics_json  TEXT NOT NULL DEFAULT '{}',
    UNIQUE (path, size, mtime_ns, sha256)
);
CREATE INDEX IF NOT EXISTS runs_by_acquired ON runs (acquired_at, run_id);
CREATE INDEX IF NOT EXISTS runs_by_judged ON runs (judged_at, run_id);
CREATE TABLE IF NOT EXISTS metrics (
    run_id      INTEGER NOT NULL REFERENCES runs (run_id) ON DELETE CASCADE,
    path        TEXT NOT NULL,
    acquired_at TEXT NOT NULL,
    value       REAL,
    is_bool     INTEGER NOT NULL DEFAULT 0,
    PRIMARY KEY (run_id, path)
);
CREATE INDEX IF NOT EXISTS metrics_by_path ON metrics (path, acquired_at, run_id);
"""

register_schema("history", SCHEMA)

_PAGE = 200  # rows per SELECT while filtering a series by run kind


def to_text(at: datetime) -> str:
    """UTC ISO-8601 with microseconds; naive datetimes are taken as UTC."""
    at = at.replace(tzinfo=UTC) if at.tzinfo is None else at.astimezone(UTC)
    return at.isoformat(timespec="microseconds")


def from_text(text: str) -> datetime:
    """The inverse of ``to_text`` (an aware UTC datetime)."""
    return datetime.fromisoformat(text).astimezone(UTC)


@dataclass(frozen=True, slots=True, kw_only=True)
class RunRow:
    """One recorded run, as read back from the store."""

    run_id: int
    file_name: str
    path: str
    size: int
    mtime_ns: int
    sha256: str  # '' when the file could not be hashed
    acquired_at: datetime
    judged_at: datetime
    status: Status
    error: str | None
    findings: tuple[Finding, ...]
    metrics: dict[str, float | bool | None]


def _clean(value: float | bool | None) -> float | bool | None:
    if isinstance(value, float) and not math.isfinite(value):
        return None  # NaN/inf are not JSON and mean "not measured" here
    return value


def record_verdict(conn: sqlite3.Connection, verdict: Verdict) -> int:
    """Insert or update the run row of ``verdict`` and its metrics; returns its ``run_id``.

    Call inside the caller's ``db.write(conn)`` transaction. Idempotent: the same file identity
    (path, size, mtime_ns, sha256) keeps one row and the same ``run_id``; its metrics rows are
    replaced. The run's time is ``verdict.acquired_at`` (``watcher.records.run_time``).
    """
    run_file = verdict.run_file
    metrics = verdict.metrics
    acquired_at = verdict.acquired_at
    judged_at = verdict.judged_at or datetime.now(tz=UTC)
    flat = {k: _clean(v) for k, v in metrics.flat().items()} if metrics is not None else {}
    acquired_text = to_text(acquired_at)
    row = conn.execute(
        """
        INSERT INTO runs (path, file_name, size, mtime_ns, sha256, format, acquired_at,
                          judged_at, status, error, error_kind, findings_json, metrics_json)
        VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)
        ON CONFLICT (path, size, mtime_ns, sha256) DO UPDATE SET
            file_name = excluded.file_name, format = excluded.format,
            acquired_at = excluded.acquired_at, judged_at = excluded.judged_at,
            status = excluded.status, error = excluded.error, error_kind = excluded.error_kind,
            findings_json = excluded.findings_json, metrics_json = excluded.metrics_json
        RETURNING run_id
        """,
        (
            path_value(run_file.path),
            path_value(run_file.path.name),
            run_file.size,
            run_file.mtime_ns,
            run_file.sha256 or "",
            metrics.format if metrics is not None else None,
            acquired_text,
            to_text(judged_at),
            str(verdict.status),
            None if verdict.error is None else shown(verdict.error),  # may quote the file name
            verdict.error_kind,
            json.dumps([f.to_dict() for f in verdict.findings]),
            json.dumps(flat),
        ),
    ).fetchone()
    run_id = int(row[0])
    conn.execute("DELETE FROM trend_states WHERE run_id = ?", (run_id,))
    conn.executemany(
        "INSERT INTO trend_states (run_id, check_name, path, acquired_at, spec, n_runs, ewma,"
        " cusum_hi, cusum_lo) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
        [
            (
                run_id,
                t.check,
                t.path,
                acquired_text,
                t.spec,
                t.n_runs,
                t.ewma,
                t.cusum_hi,
                t.cusum_lo,
            )
            for t in verdict.trend_states
        ],
    )
    conn.execute("DELETE FROM metrics WHERE run_id = ?", (run_id,))
    conn.executemany(
        "INSERT INTO metrics (run_id, path, acquired_at, value, is_bool) VALUES (?, ?, ?, ?, ?)",
        [
            (run_id, path, acquired_text, None if v is None else float(v), isinstance(v, bool))
            for path, v in flat.items()
        ],
    )
    return run_id


def _finding(d: dict[str, Any]) -> Finding:
    return Finding(
        check=d["check"],
        severity=Severity(d["severity"]),
        metric=d["metric"],
        subject=d["subject"],
        message=d["message"],
        value=d.get("value"),
        limit=d.get("limit", ""),
        rule=d.get("rule", "limit"),
        baseline=d.get("baseline"),
        forecast_h=d.get("forecast_h"),
    )


_RUN_COLUMNS = (
    "run_id, file_name, path, acquired_at, judged_at, status, error, findings_json, metrics_json,"
    " size, mtime_ns, sha256"
)


def _run_row(r: sqlite3.Row | tuple[Any, ...]) -> RunRow:
    return RunRow(
        run_id=int(r[0]),
        file_name=path_text(r[1]),
        path=path_text(r[2]),
        acquired_at=from_text(r[3]),
        judged_at=from_text(r[4]),
        status=Status(r[5]),
        error=r[6],
        # Most runs have no finding: skip the parse of their "[]" (a 30-day chart reads thousands).
        findings=() if r[7] == "[]" else tuple(_finding(d) for d in json.loads(r[7])),
        metrics=json.loads(r[8]),
        size=int(r[9]),
        mtime_ns=int(r[10]),
        sha256=r[11],
    )


def get_run(conn: sqlite3.Connection, run_id: int) -> RunRow | None:
    """One recorded run by id (the health-log line is rebuilt from it), or None."""
    row = conn.execute(
        f"SELECT {_RUN_COLUMNS} FROM runs WHERE run_id = ?",  # noqa: S608 - constant columns
        (run_id,),
    ).fetchone()
    return None if row is None else _run_row(row)


def recent_runs(conn: sqlite3.Connection, *, limit: int = 20) -> list[RunRow]:
    """The last ``limit`` runs judged, newest judgement first."""
    rows = conn.execute(
        f"SELECT {_RUN_COLUMNS} FROM runs ORDER BY judged_at DESC, run_id DESC LIMIT ?",  # noqa: S608
        (limit,),
    ).fetchall()
    return [_run_row(r) for r in rows]


def runs_between(conn: sqlite3.Connection, start: datetime, end: datetime) -> list[RunRow]:
    """Runs acquired in ``[start, end)``, oldest first (the daily digest's day)."""
    rows = conn.execute(
        f"SELECT {_RUN_COLUMNS} FROM runs WHERE acquired_at >= ? AND acquired_at < ? "  # noqa: S608
        "ORDER BY acquired_at, run_id",
        (to_text(start), to_text(end)),
    ).fetchall()
    return [_run_row(r) for r in rows]


def newest_between(
    conn: sqlite3.Connection, start: datetime, end: datetime, *, limit: int
) -> list[RunRow]:
    """The newest ``limit`` runs acquired in ``[start, end)``, oldest first (the floor page's
    range: bounded however many runs the range holds)."""
    rows = conn.execute(
        f"SELECT {_RUN_COLUMNS} FROM runs WHERE acquired_at >= ? AND acquired_at < ? "  # noqa: S608
        "ORDER BY acquired_at DESC, run_id DESC LIMIT ?",
        (to_text(start), to_text(end), limit),
    ).fetchall()
    return [_run_row(r) for r in reversed(rows)]


def _point(r: sqlite3.Row | tuple[Any, ...]) -> HistoryPoint:
    value: float | bool | None = r[2]
    if value is not None and r[3]:
        value = bool(value)
    return HistoryPoint(
        file_name=path_text(r[0]), acquired_at=from_text(r[1]), value=value, status=Status(r[4])
    )


_SERIES_SELECT = """
    SELECT r.file_name, m.acquired_at, m.value, m.is_bool, r.status
    FROM metrics AS m JOIN runs AS r ON r.run_id = m.run_id
    WHERE m.path = ?
"""


class StoreHistory:
    """``watcher.rules.judge.History`` over the SQLite store.

    Args:
        conn: an open state database (``db.connect``).
        applies_to: optional run-kind filter (globs or ``re:<regex>``, as a check's
            ``applies_to``); only runs whose file name matches appear in a series.
    """

    def __init__(self, conn: sqlite3.Connection, *, applies_to: Sequence[str] = ()) -> None:
        self._conn = conn
        self._applies_to = tuple(applies_to)

    def series(self, metric: str, *, before: datetime, limit: int) -> list[HistoryPoint]:
        """Oldest first: at most ``limit`` most recent runs acquired strictly before ``before``."""
        if limit <= 0:
            return []
        newest_first: list[HistoryPoint] = []
        cursor_at = to_text(before)
        cursor_id: int | None = None
        params: list[Any]
        while len(newest_first) < limit:
            # Keyset paging, newest first: the kind filter may drop rows, so read in pages.
            if cursor_id is None:
                where, params = "AND m.acquired_at < ?", [metric, cursor_at]
            else:
                where = "AND (m.acquired_at < ? OR (m.acquired_at = ? AND m.run_id < ?))"
                params = [metric, cursor_at, cursor_at, cursor_id]
            rows = self._conn.execute(
                _SERIES_SELECT.replace("SELECT r.file_name", "SELECT m.run_id, r.file_name")
                + f" {where} ORDER BY m.acquired_at DESC, m.run_id DESC LIMIT {_PAGE}",
                params,
            ).fetchall()
            for r in rows:
                point = _point(tuple(r)[1:])
                if matches_applies_to(self._applies_to, point.file_name):
                    newest_first.append(point)
                    if len(newest_first) == limit:
                        break
            if len(rows) < _PAGE:
                break
            cursor_id, cursor_at = int(rows[-1][0]), rows[-1][2]
        newest_first.reverse()
        return newest_first

    def trend_state(self, check: str, path: str, *, before: datetime) -> TrendState | None:
        """The EWMA/CUSUM state stored with the latest run acquired before ``before``."""
        row = self._conn.execute(
            "SELECT spec, n_runs, ewma, cusum_hi, cusum_lo FROM trend_states"
            " WHERE check_name = ? AND path = ? AND acquired_at < ?"
            " ORDER BY acquired_at DESC, run_id DESC LIMIT 1",
            (check, path, to_text(before)),
        ).fetchone()
        if row is None:
            return None
        return TrendState(
            check=check,
            path=path,
            spec=row[0],
            n_runs=int(row[1]),
            ewma=row[2],
            cusum_hi=row[3],
            cusum_lo=row[4],
        )
