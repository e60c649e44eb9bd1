"""Tables of the notify stage: open alert states, the durable outbox of messages, their deliveries.

Every message is stored before anything is sent; its outcome is kept per channel in
``deliveries`` (status, attempts, last error with the masked URL, next attempt time). Functions
that write expect to run inside ``db.write(conn)``; none of them sends or renders anything.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from enum import StrEnum
from typing import TYPE_CHECKING

from watcher.records import AlertState, Finding, Severity
from watcher.store.db import register_schema
from watcher.store.rows import from_row

if TYPE_CHECKING:
    import sqlite3

SCHEMA = """
CREATE TABLE IF NOT EXISTS alert_state (
    instrument TEXT NOT NULL,
    check_name TEXT NOT NULL,
    subject TEXT NOT NULL,
    channel TEXT NOT NULL,
    severity TEXT NOT NULL,
    raised_at_s REAL NOT NULL,
    last_sent_at_s REAL NOT NULL,
    run_file TEXT,
    finding TEXT NOT NULL,
    PRIMARY KEY (instrument, check_name, subject, channel)
);
CREATE TABLE IF NOT EXISTS messages (
    message_id INTEGER PRIMARY KEY AUTOINCREMENT,
    channel TEXT NOT NULL,
    kind TEXT NOT NULL,
    ref TEXT NOT NULL,
    created_at_s REAL NOT NULL,
    title TEXT NOT NULL,
    body TEXT NOT NULL,
    notify_type TEXT NOT NULL,
    attachment BLOB,
    attachment_name TEXT,
    plot_metric TEXT,
    UNIQUE (channel, ref)
);
CREATE TABLE IF NOT EXISTS deliveries (
    message_id INTEGER PRIMARY KEY REFERENCES messages(message_id) ON DELETE CASCADE,
    channel TEXT NOT NULL,
    status TEXT NOT NULL CHECK (status IN ('pending', 'delivered', 'abandoned')),
    attempts INTEGER NOT NULL DEFAULT 0,
    last_error TEXT,
    next_attempt_at_s REAL NOT NULL,
    finished_at_s REAL
);
CREATE INDEX IF NOT EXISTS deliveries_pending ON deliveries (channel, status, message_id);
"""

register_schema("outbox", SCHEMA)


class DeliveryStatus(StrEnum):
    PENDING = "pending"
    DELIVERED = "delivered"
    ABANDONED = "abandoned"


@dataclass(frozen=True, slots=True, kw_only=True)
class OpenAlert:
    """One row of ``alert_state``."""

    instrument: str
    check: str
    subject: str
    channel: str
    run_file: str | None
    state: AlertState


@dataclass(frozen=True, slots=True, kw_only=True)
class Message:
    """A stored message and its delivery to its one channel."""

    message_id: int
    channel: str
    kind: str  # alert, reminder, event, digest
    ref: str  # what it is about, unique per channel: run:<id>, digest:<day>, ...
    created_at_s: float
    title: str
    body: str
    notify_type: str  # apprise notify type: info, success, warning, failure
    attachment: bytes | None
    attachment_name: str | None
    plot_metric: str | None
    status: DeliveryStatus
    attempts: int
    last_error: str | None
    next_attempt_at_s: float
    finished_at_s: float | None


def _finding_from_json(text: str) -> Finding:
    data = json.loads(text)
    data["severity"] = Severity(data["severity"])
    return Finding(**data)


def _acked_at_s(row: sqlite3.Row) -> float | None:
    # The column comes with schema version 4 (watcher.store.migrations); a version-1 table
    # read before the upgrade has none.
    return row["acked_at_s"] if "acked_at_s" in row.keys() else None  # noqa: SIM118


def load_alerts(
    conn: sqlite3.Connection, *, instrument: str | None = None, channel: str | None = None
) -> list[OpenAlert]:
    """Open alerts, optionally of one instrument and/or channel, in key order."""
    sql = "SELECT * FROM alert_state WHERE 1=1"
    args: list[str] = []
    if instrument is not None:
        sql += " AND instrument = ?"
        args.append(instrument)
    if channel is not None:
        sql += " AND channel = ?"
        args.append(channel)
    sql += " ORDER BY instrument, channel, check_name, subject"
    return [
        OpenAlert(
            instrument=row["instrument"],
            check=row["check_name"],
            subject=row["subject"],
            channel=row["channel"],
            run_file=row["run_file"],
            state=AlertState(
                severity=Severity(row["severity"]),
                raised_at_s=row["raised_at_s"],
                last_sent_at_s=row["last_sent_at_s"],
                finding=_finding_from_json(row["finding"]),
                acked_at_s=_acked_at_s(row),
            ),
        )
        for row in conn.execute(sql, args)
    ]


def save_alert(
    conn: sqlite3.Connection,
    *,
    instrument: str,
    check: str,
    subject: str,
    channel: str,
    state: AlertState | None,
    run_file: str | None,
) -> None:
    """Store an alert's new state; None deletes it (cleared)."""
    if state is None:
        conn.execute(
            "DELETE FROM alert_state WHERE instrument = ? AND check_name = ? AND subject = ?"
            " AND channel = ?",
            (instrument, check, subject, channel),
        )
        return
    conn.execute(
        "INSERT INTO alert_state (instrument, check_name, subject, channel, severity, raised_at_s,"
        " last_sent_at_s, run_file, finding, acked_at_s) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"
        " ON CONFLICT (instrument, check_name, subject, channel) DO UPDATE SET"
        " severity = excluded.severity, last_sent_at_s = excluded.last_sent_at_s,"
        " run_file = COALESCE(excluded.run_file, alert_state.run_file), finding = excluded.finding,"
        " acked_at_s = excluded.acked_at_s",
        (
            instrument,
            check,
            subject,
            channel,
            str(state.severity),
            state.raised_at_s,
            state.last_sent_at_s,
            run_file,
            json.dumps(state.finding.to_dict(), sort_keys=True),
            state.acked_at_s,
        ),
    )


def has_message(conn: sqlite3.Connection, ref: str) -> bool:
    """Whether any channel already has a message about ``ref`` (keeps recording idempotent)."""
    row = conn.execute("SELECT 1 FROM messages WHERE ref = ? LIMIT 1", (ref,)).fetchone()
    return row is not None


def enqueue(
    conn: sqlite3.Connection,
    *,
    channel: str,
    kind: str,
    ref: str,
    created_at_s: float,
    title: str,
    body: str,
    notify_type: str = "info",
    attachment: bytes | None = None,
    attachment_name: str | None = None,
    plot_metric: str | None = None,
) -> int | None:
    """Store a message and its pending delivery; returns its id, None if (channel, ref) exists."""
    cur = conn.execute(
        "INSERT INTO messages (channel, kind, ref, created_at_s, title, body, notify_type,"
        " attachment, attachment_name, plot_metric) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"
        " ON CONFLICT (channel, ref) DO NOTHING",
        (
            channel,
            kind,
            ref,
            created_at_s,
            title,
            body,
            notify_type,
            attachment,
            attachment_name,
            plot_metric,
        ),
    )
    if cur.rowcount == 0:
        return None
    message_id = cur.lastrowid
    assert message_id is not None  # noqa: S101 - an INSERT that added a row has a rowid
    conn.execute(
        "INSERT INTO deliveries (message_id, channel, status, next_attempt_at_s)"
        " VALUES (?, ?, 'pending', ?)",
        (message_id, channel, created_at_s),
    )
    return message_id


_MESSAGE_SQL = (
    "SELECT m.*, d.status, d.attempts, d.last_error, d.next_attempt_at_s, d.finished_at_s"
    " FROM messages m JOIN deliveries d USING (message_id)"
)


def _message(row: sqlite3.Row) -> Message:
    return from_row(Message, row, status=DeliveryStatus(row["status"]))


def next_pending(conn: sqlite3.Connection, channel: str) -> Message | None:
    """The oldest pending message of a channel: it blocks every later one (delivery order)."""
    row = conn.execute(
        _MESSAGE_SQL + " WHERE d.channel = ? AND d.status = 'pending' ORDER BY message_id LIMIT 1",
        (channel,),
    ).fetchone()
    return None if row is None else _message(row)


def messages(
    conn: sqlite3.Connection, *, statuses: tuple[DeliveryStatus, ...] | None = None
) -> list[Message]:
    """Stored messages, oldest first, optionally only those with the given delivery statuses."""
    sql = _MESSAGE_SQL
    args: tuple[str, ...] = ()
    if statuses:
        sql += " WHERE d.status IN (" + ", ".join("?" for _ in statuses) + ")"
        args = tuple(str(s) for s in statuses)
    return [_message(row) for row in conn.execute(sql + " ORDER BY message_id", args)]


def pending_count(conn: sqlite3.Connection) -> int:
    """How many deliveries are still waiting to succeed."""
    row = conn.execute("SELECT count(*) FROM deliveries WHERE status = 'pending'").fetchone()
    return int(row[0])


def mark_delivered(conn: sqlite3.Connection, message_id: int, now_s: float) -> None:
    conn.execute(
        "UPDATE deliveries SET status = 'delivered', attempts = attempts + 1, finished_at_s = ?,"
        " last_error = NULL WHERE message_id = ?",
        (now_s, message_id),
    )


def mark_failed(
    conn: sqlite3.Connection, message_id: int, *, error: str, next_attempt_at_s: float
) -> None:
    """Count a failed attempt; ``error`` must already carry the masked URL only."""
    conn.execute(
        "UPDATE deliveries SET attempts = attempts + 1, last_error = ?, next_attempt_at_s = ?"
        " WHERE message_id = ?",
        (error, next_attempt_at_s, message_id),
    )


def mark_abandoned(conn: sqlite3.Connection, message_id: int, now_s: float) -> None:
    conn.execute(
        "UPDATE deliveries SET status = 'abandoned', finished_at_s = ? WHERE message_id = ?",
        (now_s, message_id),
    )


def set_attachment(conn: sqlite3.Connection, message_id: int, data: bytes, name: str) -> None:
    """Keep a plot rendered at first send, so that retries send the same picture."""
    conn.execute(
        "UPDATE messages SET attachment = ?, attachment_name = ?, plot_metric = NULL"
        " WHERE message_id = ?",
        (data, name, message_id),
    )
