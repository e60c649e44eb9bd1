"""The read side of the central store: what ``status --all``, ``digest --instrument`` and a
page server show, for one instrument or all of them.

Every function takes an open connection (``open_reader``: read-only, with time limits) and
returns frozen records; none writes. Instrument names and ranges are values bound as query
parameters, never text in the SQL.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime  # noqa: TC003 - a field type of the records, read at runtime
from typing import TYPE_CHECKING, Any

from watcher.central import schema
from watcher.central.url import masked, scrub
from watcher.errors import StoreError
from watcher.records import Severity, Status

if TYPE_CHECKING:
    import psycopg

MAX_RUNS = 10_000  # one answer at most: a page or a terminal shows far fewer


@dataclass(frozen=True, slots=True, kw_only=True)
class InstrumentSummary:
    """One instrument now: its last run, how many problems are open and the worst of them."""

    instrument: str
    last_file: str | None
    last_status: Status | None
    last_acquired_at: datetime | None
    last_judged_at: datetime | None
    runs: int
    open_alerts: int  # open (check, subject) pairs, whichever channels hold them
    worst_open: Severity | None
    last_published_at: datetime


@dataclass(frozen=True, slots=True, kw_only=True)
class CentralRun:
    instrument: str
    file_key: str
    file_name: str
    acquired_at: datetime
    judged_at: datetime
    status: Status
    error: str | None
    metrics: dict[str, Any]
    findings: tuple[dict[str, Any], ...]


@dataclass(frozen=True, slots=True, kw_only=True)
class CentralAlert:
    """One open problem of an instrument, merged over the channels that hold it."""

    instrument: str
    check: str
    subject: str
    severity: Severity
    raised_at: datetime | None
    message: str | None
    metric: str | None
    value: float | None
    run_file: str | None
    channels: tuple[str, ...]


@dataclass(frozen=True, slots=True, kw_only=True)
class MetricPoint:
    acquired_at: datetime
    value: float | None
    file_key: str


def open_reader(url: str, connect_timeout_s: float = 5.0) -> psycopg.Connection[Any]:
    """A read-only connection to the central store at the version this ionwarden reads.

    Raises:
        StoreError: the server cannot be reached (the message names the masked URL, never
            the password), or its schema is missing, older or newer.
    """
    import psycopg

    where = masked(url)
    try:
        conn = psycopg.connect(
            url,
            autocommit=True,
            connect_timeout=max(2, math.ceil(connect_timeout_s)),
            application_name="ionwarden-reader",
            options="-c default_transaction_read_only=on -c statement_timeout=30000",
        )
    except psycopg.Error as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise StoreError(f"central store {where}: {scrub(first, url)}") from exc
    try:
        found = schema.version(conn)
    except psycopg.Error as exc:
        conn.close()
        raise StoreError(f"central store {where}: {scrub(str(exc), url)}") from exc
    if found != schema.SCHEMA_VERSION:
        conn.close()
        if found == 0:
            raise StoreError(
                f"central store {where} has no ionwarden tables yet (no daemon has published)"
            )
        relation = "newer" if found > schema.SCHEMA_VERSION else "older"
        raise StoreError(
            f"central store {where} has schema version {found}, {relation} than version "
            f"{schema.SCHEMA_VERSION} that this ionwarden reads"
        )
    return conn


def profile(conn: psycopg.Connection[Any], instrument: str) -> dict[str, Any] | None:
    """The instrument's published profile (``watcher.central.profile``), or None."""
    row = conn.execute(
        "SELECT profile FROM instruments WHERE instrument = %s", (instrument,)
    ).fetchone()
    return None if row is None or row[0] is None else dict(row[0])


def instrument_names(conn: psycopg.Connection[Any]) -> list[str]:
    return [str(r[0]) for r in conn.execute("SELECT instrument FROM instruments ORDER BY 1")]


def instruments(
    conn: psycopg.Connection[Any], names: list[str] | None = None
) -> list[InstrumentSummary]:
    """Every instrument that published (or those ``names``), by name: last run, open alerts."""
    rows = conn.execute(
        """
        SELECT i.instrument, i.last_published_at, r.file_name, r.status, r.acquired_at,
               r.judged_at, coalesce(n.runs, 0), coalesce(a.open_alerts, 0), a.severities
        FROM instruments AS i
        LEFT JOIN LATERAL (
            SELECT file_name, status, acquired_at, judged_at FROM runs
            WHERE runs.instrument = i.instrument ORDER BY acquired_at DESC, judged_at DESC LIMIT 1
        ) AS r ON true
        LEFT JOIN LATERAL (
            SELECT count(*) AS runs FROM runs WHERE runs.instrument = i.instrument
        ) AS n ON true
        LEFT JOIN LATERAL (
            SELECT count(DISTINCT (check_name, subject)) AS open_alerts,
                   array_agg(DISTINCT severity) AS severities
            FROM open_alerts WHERE open_alerts.instrument = i.instrument
        ) AS a ON true
        WHERE %(names)s::text[] IS NULL OR i.instrument = ANY(%(names)s::text[])
        ORDER BY i.instrument
        """,
        {"names": names},
    ).fetchall()
    out = []
    for r in rows:
        severities = [Severity(s) for s in (r[8] or []) if s is not None]
        out.append(
            InstrumentSummary(
                instrument=r[0],
                last_published_at=r[1],
                last_file=r[2],
                last_status=None if r[3] is None else Status(r[3]),
                last_acquired_at=r[4],
                last_judged_at=r[5],
                runs=int(r[6]),
                open_alerts=int(r[7]),
                worst_open=max(severities, key=lambda s: s.rank) if severities else None,
            )
        )
    return out


_RUNS = (
    "SELECT instrument, file_key, file_name, acquired_at, judged_at, status, error, metrics,"
    " findings FROM runs WHERE instrument = %(instrument)s"
    " AND (%(start)s::timestamptz IS NULL OR acquired_at >= %(start)s::timestamptz)"
    " AND (%(end)s::timestamptz IS NULL OR acquired_at < %(end)s::timestamptz)"
)
_RUNS_NEWEST = _RUNS + " ORDER BY acquired_at DESC, file_key LIMIT %(limit)s"
_RUNS_OLDEST = _RUNS + " ORDER BY acquired_at, file_key LIMIT %(limit)s"


def runs(
    conn: psycopg.Connection[Any],
    instrument: str,
    *,
    start: datetime | None = None,
    end: datetime | None = None,
    limit: int = 100,
    newest_first: bool = True,
) -> list[CentralRun]:
    """Runs of one instrument acquired in ``[start, end)`` (either open), at most ``limit``."""
    rows = conn.execute(
        _RUNS_NEWEST if newest_first else _RUNS_OLDEST,
        {
            "instrument": instrument,
            "start": start,
            "end": end,
            "limit": max(0, min(limit, MAX_RUNS)),
        },
    ).fetchall()
    return [
        CentralRun(
            instrument=r[0],
            file_key=r[1],
            file_name=r[2],
            acquired_at=r[3],
            judged_at=r[4],
            status=Status(r[5]),
            error=r[6],
            metrics=dict(r[7]),
            findings=tuple(r[8]),
        )
        for r in rows
    ]


def open_alerts(conn: psycopg.Connection[Any], instrument: str | None = None) -> list[CentralAlert]:
    """Open problems, of one instrument or all, worst first; one per (check, subject)."""
    rows = conn.execute(
        "SELECT instrument, check_name, subject, severity, raised_at, message, metric, run_file,"
        " channel, value FROM open_alerts"
        " WHERE %(instrument)s::text IS NULL OR instrument = %(instrument)s::text"
        " ORDER BY instrument, check_name, subject, channel",
        {"instrument": instrument},
    ).fetchall()
    merged: dict[tuple[str, str, str], dict[str, Any]] = {}
    for r in rows:
        key = (r[0], r[1], r[2])
        entry = merged.get(key)
        if entry is None:
            entry = merged[key] = {
                "instrument": r[0],
                "check": r[1],
                "subject": r[2],
                "severity": Severity(r[3]),
                "raised_at": r[4],
                "message": r[5],
                "metric": r[6],
                "value": r[9],
                "run_file": r[7],
                "channels": [],
            }
        entry["channels"].append(r[8])
        if Severity(r[3]).rank > entry["severity"].rank:
            entry["severity"], entry["message"] = Severity(r[3]), r[5]
        if r[4] is not None and (entry["raised_at"] is None or r[4] < entry["raised_at"]):
            entry["raised_at"] = r[4]
    alerts = [CentralAlert(**{**e, "channels": tuple(e["channels"])}) for e in merged.values()]
    alerts.sort(key=lambda a: (a.instrument, -a.severity.rank, a.check, a.subject))
    return alerts


def metric_series(
    conn: psycopg.Connection[Any],
    instrument: str,
    metric: str,
    *,
    start: datetime,
    end: datetime,
) -> list[MetricPoint]:
    """One metric of one instrument over ``[start, end)``, oldest first: a range scan of
    ``run_metrics``' primary key (instrument, metric, acquired_at)."""
    rows = conn.execute(
        "SELECT acquired_at, value, file_key FROM run_metrics WHERE instrument = %s"
        " AND metric = %s AND acquired_at >= %s AND acquired_at < %s ORDER BY acquired_at",
        (instrument, metric, start, end),
    ).fetchall()
    return [MetricPoint(acquired_at=r[0], value=r[1], file_key=r[2]) for r in rows]


def run_count(conn: psycopg.Connection[Any], instrument: str | None = None) -> int:
    row = conn.execute(
        "SELECT count(*) FROM runs WHERE %(i)s::text IS NULL OR instrument = %(i)s::text",
        {"i": instrument},
    ).fetchone()
    return 0 if row is None else int(row[0])
