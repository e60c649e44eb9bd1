"""The publish queue in the local SQLite store: what the central store has not confirmed yet.

Entries are written inside the daemon's own write transactions: a judged run in the very
transaction that commits it (with the alert changes that run made), alert changes from other
causes (the no-run alert) and finished deliveries by a scan (``queue_changes``) that compares the
store's alert states and deliveries with what was queued already (``central_alerts_seen``,
``central_messages_seen``, schema version 4). ``publish`` sends entries oldest ``seq`` first and
removes them only after PostgreSQL committed them, so a kill or an outage loses none; a second
send of the same entry is harmless (the central side upserts). Functions that write expect to run
inside ``db.write(conn)``; nothing here talks to the network.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

import structlog

from watcher.records import Severity, shown
from watcher.store import history, jobs

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Sequence

    from watcher.store.history import RunRow

log = structlog.get_logger("watcher.central.queue")

STORE_ID_KEY = "central.store_id"  # written by schema version 4: this store's random id


@dataclass(frozen=True, slots=True)
class Entry:
    """One queued item: ``kind`` is run, alert or message; ``payload`` its JSON object."""

    seq: int
    kind: str
    payload: dict[str, Any]


def file_key(path: str, size: int, mtime_ns: int, sha256: str | None) -> str:
    """The run's file identity on the central side: path, size, mtime and content hashed.

    The same definition as the health log's ``run_key`` (``watcher.notify.healthlog``), so a
    health-log line and its central row carry the same key; a test holds the two together.
    """
    identity = f"{path}\0{size}\0{mtime_ns}\0{sha256 or ''}"
    return hashlib.sha256(identity.encode("utf-8", "surrogateescape")).hexdigest()[:32]


def store_id(conn: sqlite3.Connection) -> str:
    value = jobs.get_state(conn, STORE_ID_KEY)
    if value is None:  # a version-4 store always has one; never publish without it
        raise RuntimeError("state database has no central.store_id (schema version 4)")
    return value


def _iso(epoch_s: float | None) -> str | None:
    return None if epoch_s is None else datetime.fromtimestamp(epoch_s, UTC).isoformat()


def run_payload(instrument: str, row: RunRow) -> dict[str, Any]:
    """A stored run as the central store takes it (names shown with undecodable bytes escaped)."""
    return {
        "instrument": instrument,
        "file_key": file_key(row.path, row.size, row.mtime_ns, row.sha256),
        "file_name": shown(row.file_name),
        "path": shown(row.path),
        "size": row.size,
        "mtime_ns": row.mtime_ns,
        "sha256": row.sha256,
        "acquired_at": row.acquired_at.isoformat(),
        "judged_at": row.judged_at.isoformat(),
        "status": str(row.status),
        "error": row.error,
        "metrics": row.metrics,
        "findings": [f.to_dict() for f in row.findings],
        "local_run_id": row.run_id,
    }


def _finite(value: Any) -> Any:
    """``value`` with NaN and infinities as None: JSON has neither, and both mean "not
    measured" here, as in the local store."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_finite(v) for v in value]
    return value


def _put(conn: sqlite3.Connection, kind: str, payload: dict[str, Any], now_s: float) -> None:
    conn.execute(
        "INSERT INTO central_queue (kind, payload, queued_at_s) VALUES (?, ?, ?)",
        (kind, json.dumps(_finite(payload), allow_nan=False), now_s),
    )


def queue_judged(conn: sqlite3.Connection, instrument: str, run_id: int, now_s: float) -> None:
    """Inside the run's own transaction: the run as stored, then the alert changes it made.

    A run whose record cannot be written as JSON is logged and left out rather than failing
    the transaction: that would hold back the run's verdict and alerts, which matter more.
    """
    row = history.get_run(conn, run_id)
    if row is not None:
        try:
            _put(conn, "run", run_payload(instrument, row), now_s)
        except (TypeError, ValueError) as exc:
            log.error("central.queue_failed", run_id=run_id, error=str(exc))
    queue_alert_changes(conn, now_s)


def queue_alert_changes(conn: sqlite3.Connection, now_s: float) -> int:
    """Queue every difference between the open alert states and the states queued before:
    raised, escalated or lowered, cleared; returns how many."""
    seen = {
        (r[0], r[1], r[2], r[3]): str(r[4])
        for r in conn.execute(
            "SELECT instrument, check_name, subject, channel, severity FROM central_alerts_seen"
        )
    }
    # alert_state is the notify stage's table (watcher.store.outbox); read here, never written.
    now: dict[tuple[str, str, str, str], sqlite3.Row] = {
        (r["instrument"], r["check_name"], r["subject"], r["channel"]): r
        for r in conn.execute(
            "SELECT instrument, check_name, subject, channel, severity, raised_at_s, run_file,"
            " finding FROM alert_state"
        )
    }
    changes = 0
    for key in sorted(set(seen) | set(now)):
        before = seen.get(key)
        row = now.get(key)
        after = None if row is None else str(row["severity"])
        if before == after:
            continue
        if after is None:
            action = "cleared"
        elif before is None:
            action = "raised"
        else:
            action = "escalated" if Severity(after).rank > Severity(before).rank else "lowered"
        finding: dict[str, Any] = json.loads(row["finding"]) if row is not None else {}
        _put(
            conn,
            "alert",
            {
                "instrument": key[0],
                "check": key[1],
                "subject": key[2],
                "channel": key[3],
                "action": action,
                "severity": after or before,
                "previous_severity": before,
                "at": _iso(now_s),
                "raised_at": _iso(row["raised_at_s"]) if row is not None else None,
                "message": finding.get("message"),
                "metric": finding.get("metric"),
                "value": finding.get("value"),
                "run_file": None if row is None or row["run_file"] is None else row["run_file"],
            },
            now_s,
        )
        if after is None:
            conn.execute(
                "DELETE FROM central_alerts_seen WHERE instrument = ? AND check_name = ?"
                " AND subject = ? AND channel = ?",
                key,
            )
        else:
            conn.execute(
                "INSERT INTO central_alerts_seen"
                " (instrument, check_name, subject, channel, severity) VALUES (?, ?, ?, ?, ?)"
                " ON CONFLICT (instrument, check_name, subject, channel)"
                " DO UPDATE SET severity = excluded.severity",
                (*key, after),
            )
        changes += 1
    return changes


def queue_deliveries(conn: sqlite3.Connection, instrument: str, now_s: float) -> int:
    """Queue every message whose delivery ended (delivered, or abandoned after its retries)
    and was not queued before, in the order they ended; returns how many."""
    rows = conn.execute(
        "SELECT m.message_id, m.channel, m.kind, m.ref, m.created_at_s, m.title, d.status,"
        " d.attempts, d.finished_at_s FROM deliveries AS d JOIN messages AS m USING (message_id)"
        " LEFT JOIN central_messages_seen AS s ON s.message_id = m.message_id"
        " WHERE d.status IN ('delivered', 'abandoned') AND s.message_id IS NULL"
        " ORDER BY d.finished_at_s, m.message_id"
    ).fetchall()
    for r in rows:
        _put(
            conn,
            "message",
            {
                "instrument": instrument,
                "message_id": int(r["message_id"]),
                "channel": r["channel"],
                "kind": r["kind"],
                "ref": r["ref"],
                "title": r["title"],
                "status": r["status"],
                "attempts": int(r["attempts"]),
                "created_at": _iso(r["created_at_s"]),
                "finished_at": _iso(r["finished_at_s"]),
            },
            now_s,
        )
        conn.execute(
            "INSERT OR IGNORE INTO central_messages_seen (message_id) VALUES (?)",
            (r["message_id"],),
        )
    return len(rows)


def queue_changes(conn: sqlite3.Connection, instrument: str, now_s: float) -> int:
    """Alert changes and finished deliveries not queued yet (the publisher's scan)."""
    return queue_alert_changes(conn, now_s) + queue_deliveries(conn, instrument, now_s)


def pending(conn: sqlite3.Connection, limit: int) -> list[Entry]:
    """The oldest ``limit`` entries, in the order they were queued."""
    rows = conn.execute(
        "SELECT seq, kind, payload FROM central_queue ORDER BY seq LIMIT ?", (limit,)
    ).fetchall()
    return [Entry(int(r[0]), str(r[1]), json.loads(r[2])) for r in rows]


def remove(conn: sqlite3.Connection, seqs: Sequence[int]) -> None:
    """Drop entries the central store committed (inside ``db.write``)."""
    conn.executemany("DELETE FROM central_queue WHERE seq = ?", [(s,) for s in seqs])


def length(conn: sqlite3.Connection) -> int:
    """Entries waiting to be published."""
    return int(conn.execute("SELECT count(*) FROM central_queue").fetchone()[0])


def oldest_queued_s(conn: sqlite3.Connection) -> float | None:
    """When the oldest waiting entry was queued (how far behind the central store is)."""
    row = conn.execute("SELECT min(queued_at_s) FROM central_queue").fetchone()
    return None if row is None or row[0] is None else float(row[0])


def changes_waiting(conn: sqlite3.Connection) -> bool:
    """Whether ``queue_changes`` would queue anything (a read: most scans find nothing, and
    then write nothing)."""
    row = conn.execute(
        "SELECT EXISTS (SELECT 1 FROM alert_state AS a LEFT JOIN central_alerts_seen AS s"
        "   ON s.instrument = a.instrument AND s.check_name = a.check_name"
        "   AND s.subject = a.subject AND s.channel = a.channel"
        "   WHERE s.severity IS NULL OR s.severity != a.severity)"
        " OR EXISTS (SELECT 1 FROM central_alerts_seen AS s LEFT JOIN alert_state AS a"
        "   ON s.instrument = a.instrument AND s.check_name = a.check_name"
        "   AND s.subject = a.subject AND s.channel = a.channel WHERE a.instrument IS NULL)"
        " OR EXISTS (SELECT 1 FROM deliveries AS d"
        "   LEFT JOIN central_messages_seen AS m ON m.message_id = d.message_id"
        "   WHERE d.status IN ('delivered', 'abandoned') AND m.message_id IS NULL)"
    ).fetchone()
    return bool(row[0])
