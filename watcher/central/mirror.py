"""One instrument's runs and open alerts from the central store, copied into a local store of the
usual layout, so the daily digest (``watcher.notify.digest``) draws a central instrument's day
with the same code, charts and wording as the instrument's own.

The copy is a throwaway store in a temporary folder: the digest reads it, then it is removed.
Rows go in through the store's own tables (``watcher.store.history`` runs, ``watcher.store.outbox``
alert states), with the central file key as the file identity.
"""

from __future__ import annotations

import json
from datetime import timedelta
from typing import TYPE_CHECKING, Any

from watcher.central import reader
from watcher.records import AlertState, Finding
from watcher.store import db, history, outbox

if TYPE_CHECKING:
    import sqlite3
    from datetime import datetime
    from pathlib import Path

    import psycopg

# What the digest reads before the day: its baselines look back this far
# (watcher.notify.digest._BASELINE_LOOKBACK), plus a day of margin.
LOOKBACK = timedelta(days=31)


def mirror(
    pg: psycopg.Connection[Any],
    instrument: str,
    *,
    start: datetime,
    end: datetime,
    state_dir: Path,
) -> sqlite3.Connection:
    """A local store under ``state_dir`` holding ``instrument``'s runs acquired in
    ``[start - LOOKBACK, end)`` and its open alerts; returns a connection to it."""
    runs = reader.runs(
        pg,
        instrument,
        start=start - LOOKBACK,
        end=end,
        limit=reader.MAX_RUNS,
        newest_first=False,
    )
    alerts = reader.open_alerts(pg, instrument)
    conn = db.connect(state_dir)
    with db.write(conn):
        conn.executemany(
            "INSERT INTO runs (path, file_name, size, mtime_ns, sha256, acquired_at, judged_at,"
            " status, error, findings_json, metrics_json) VALUES (?, ?, 0, 0, ?, ?, ?, ?, ?, ?, ?)",
            [
                (
                    r.file_key,
                    r.file_name,
                    r.file_key,
                    history.to_text(r.acquired_at),
                    history.to_text(r.judged_at),
                    str(r.status),
                    r.error,
                    json.dumps(list(r.findings)),
                    json.dumps(r.metrics),
                )
                for r in runs
            ],
        )
        for a in alerts:
            raised_s = a.raised_at.timestamp() if a.raised_at is not None else 0.0
            finding = Finding(
                check=a.check,
                severity=a.severity,
                metric=a.metric or a.subject,
                subject=a.subject,
                message=a.message or a.check,
                value=a.value,
                limit="",
            )
            for channel in a.channels:
                outbox.save_alert(
                    conn,
                    instrument=instrument,
                    check=a.check,
                    subject=a.subject,
                    channel=channel,
                    state=AlertState(
                        severity=a.severity,
                        raised_at_s=raised_s,
                        last_sent_at_s=raised_s,
                        finding=finding,
                    ),
                    run_file=a.run_file,
                )
    return conn
