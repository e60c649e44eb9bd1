"""People's controls on the alarms, in the state database: acknowledgements, silences, events.

Tables (schema version 4, ``watcher.store.migrations``):

- ``acks``: who acknowledged which open alert (instrument, check, subject) when, at which
  severity, with an optional note; ``alert_state.acked_at_s`` is the state machine's copy.
- ``silences``: ``ionwarden silence add`` windows (start, end, scope); ``summarized`` is set
  once the end-of-silence summary was queued, so a restart never sends it twice.
- ``silenced_changes``: alert changes that reached no channel because of a silence or a
  maintenance window, kept for that summary (``reported`` once it was told).
- ``notes``: events on the record (``ionwarden note``), with ``reset_baselines``.
- ``control_log``: one row per command, the health-log event the daemon owes for it (only the
  daemon writes the health log; it notices these rows within a second and marks them logged).

The CLI commands write these inside ``db.write(conn)`` (``BEGIN IMMEDIATE``) while the daemon
runs; writes here expect the caller's transaction. ``ResettableHistory`` is the run history as
the rules read it, starting again after the latest note that resets baselines.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from watcher.records import HistoryPoint, Severity, TrendState
from watcher.store.history import StoreHistory, from_text, to_text

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Sequence
    from datetime import datetime


@dataclass(frozen=True, slots=True, kw_only=True)
class Ack:
    """One acknowledgement of an open alert."""

    ack_id: int
    at_s: float
    instrument: str
    check: str
    subject: str
    severity: Severity
    raised_at_s: float  # the alert it was for: a later alert on the same key is a new one
    by: str
    note: str | None
    run_file: str | None = None  # the run that raised the alert (the digest lists it that day)


@dataclass(frozen=True, slots=True, kw_only=True)
class Silence:
    """A silence: alerts of ``instrument`` (and ``check``/``subject`` when set) reach no channel
    from ``start_s`` to ``end_s``."""

    silence_id: int
    instrument: str
    check: str | None
    subject: str | None
    reason: str
    by: str
    start_s: float
    end_s: float
    ended_early_s: float | None
    summarized: bool


@dataclass(frozen=True, slots=True, kw_only=True)
class Note:
    """An event on the record: the column was replaced, the source cleaned, ..."""

    note_id: int
    instrument: str
    at: datetime  # aware UTC
    kind: str
    text: str
    reset_baselines: bool
    by: str


@dataclass(frozen=True, slots=True, kw_only=True)
class SilencedChange:
    """An alert change that no channel was told of (a silence or a maintenance window)."""

    change_id: int
    at_s: float
    channel: str
    check: str
    subject: str
    action: str  # watcher.records.AlertAction value
    severity: Severity
    line: str  # the message line it would have had


@dataclass(frozen=True, slots=True, kw_only=True)
class LogEntry:
    entry_id: int
    at_s: float
    kind: str
    fields: dict[str, Any]


# -- acknowledgements ---------------------------------------------------------------------------


def add_ack(
    conn: sqlite3.Connection,
    *,
    at_s: float,
    instrument: str,
    check: str,
    subject: str,
    severity: Severity,
    raised_at_s: float,
    by: str,
    note: str | None,
    run_file: str | None = None,
) -> int:
    cur = conn.execute(
        "INSERT INTO acks (at_s, instrument, check_name, subject, severity, raised_at_s, by_name,"
        " note, run_file) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (at_s, instrument, check, subject, str(severity), raised_at_s, by, note, run_file),
    )
    return int(cur.lastrowid or 0)


def acks(conn: sqlite3.Connection, *, instrument: str, since_s: float = 0.0) -> list[Ack]:
    """Acknowledgements of ``instrument`` at or after ``since_s``, oldest first."""
    rows = conn.execute(
        "SELECT * FROM acks WHERE instrument = ? AND at_s >= ? ORDER BY at_s, ack_id",
        (instrument, since_s),
    ).fetchall()
    return [
        Ack(
            ack_id=r["ack_id"],
            at_s=r["at_s"],
            instrument=r["instrument"],
            check=r["check_name"],
            subject=r["subject"],
            severity=Severity(r["severity"]),
            raised_at_s=r["raised_at_s"],
            by=r["by_name"],
            note=r["note"],
            run_file=r["run_file"],
        )
        for r in rows
    ]


def ack_of(found: Sequence[Ack], check: str, subject: str, raised_at_s: float) -> Ack | None:
    """The latest acknowledgement of the alert raised at ``raised_at_s`` on (check, subject)."""
    mine = [
        a
        for a in found
        if a.check == check and a.subject == subject and abs(a.raised_at_s - raised_at_s) < 1e-6
    ]
    return mine[-1] if mine else None


# -- silences -------------------------------------------------------------------------------------


def _silence(r: sqlite3.Row) -> Silence:
    return Silence(
        silence_id=r["silence_id"],
        instrument=r["instrument"],
        check=r["check_name"],
        subject=r["subject"],
        reason=r["reason"],
        by=r["by_name"],
        start_s=r["start_s"],
        end_s=r["end_s"],
        ended_early_s=r["ended_early_s"],
        summarized=bool(r["summarized"]),
    )


def add_silence(
    conn: sqlite3.Connection,
    *,
    instrument: str,
    check: str | None,
    subject: str | None,
    reason: str,
    by: str,
    start_s: float,
    end_s: float,
) -> int:
    cur = conn.execute(
        "INSERT INTO silences (instrument, check_name, subject, reason, by_name, start_s, end_s)"
        " VALUES (?, ?, ?, ?, ?, ?, ?)",
        (instrument, check, subject, reason, by, start_s, end_s),
    )
    return int(cur.lastrowid or 0)


def get_silence(conn: sqlite3.Connection, silence_id: int) -> Silence | None:
    row = conn.execute("SELECT * FROM silences WHERE silence_id = ?", (silence_id,)).fetchone()
    return None if row is None else _silence(row)


def silences(
    conn: sqlite3.Connection, *, instrument: str, active_at_s: float | None = None
) -> list[Silence]:
    """The instrument's silences, oldest first; with ``active_at_s`` only those in force then."""
    sql = "SELECT * FROM silences WHERE instrument = ?"
    args: list[Any] = [instrument]
    if active_at_s is not None:
        sql += " AND start_s <= ? AND end_s > ?"
        args += [active_at_s, active_at_s]
    return [_silence(r) for r in conn.execute(sql + " ORDER BY silence_id", args)]


def silences_between(
    conn: sqlite3.Connection, *, instrument: str, start_s: float, end_s: float
) -> list[Silence]:
    """Silences that were in force at some time in ``[start_s, end_s)`` (the digest's day)."""
    rows = conn.execute(
        "SELECT * FROM silences WHERE instrument = ? AND start_s < ? AND end_s > ?"
        " ORDER BY start_s, silence_id",
        (instrument, end_s, start_s),
    ).fetchall()
    return [_silence(r) for r in rows]


def end_silence(conn: sqlite3.Connection, silence_id: int, now_s: float) -> None:
    """End a silence now: its end moves to ``now_s`` (the summary follows from the daemon)."""
    conn.execute(
        "UPDATE silences SET end_s = ?, ended_early_s = ? WHERE silence_id = ?",
        (now_s, now_s, silence_id),
    )


def ended_unsummarized(conn: sqlite3.Connection, now_s: float) -> list[Silence]:
    """Silences over by ``now_s`` whose summary has not been queued yet, oldest end first."""
    rows = conn.execute(
        "SELECT * FROM silences WHERE summarized = 0 AND end_s <= ? ORDER BY end_s, silence_id",
        (now_s,),
    ).fetchall()
    return [_silence(r) for r in rows]


def mark_summarized(conn: sqlite3.Connection, silence_id: int) -> None:
    conn.execute("UPDATE silences SET summarized = 1 WHERE silence_id = ?", (silence_id,))


# -- alert changes no channel was told of ------------------------------------------------------


def add_silenced_change(
    conn: sqlite3.Connection,
    *,
    at_s: float,
    instrument: str,
    channel: str,
    check: str,
    subject: str,
    action: str,
    severity: Severity,
    line: str,
) -> None:
    conn.execute(
        "INSERT INTO silenced_changes (at_s, instrument, channel, check_name, subject, action,"
        " severity, line) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
        (at_s, instrument, channel, check, subject, action, str(severity), line),
    )


def unreported_changes(
    conn: sqlite3.Connection, *, instrument: str, channel: str
) -> list[SilencedChange]:
    """The channel's silenced changes not yet told in a summary, oldest first."""
    rows = conn.execute(
        "SELECT * FROM silenced_changes WHERE instrument = ? AND channel = ? AND reported = 0"
        " ORDER BY at_s, change_id",
        (instrument, channel),
    ).fetchall()
    return [
        SilencedChange(
            change_id=r["change_id"],
            at_s=r["at_s"],
            channel=r["channel"],
            check=r["check_name"],
            subject=r["subject"],
            action=r["action"],
            severity=Severity(r["severity"]),
            line=r["line"],
        )
        for r in rows
    ]


def mark_reported(conn: sqlite3.Connection, change_ids: Sequence[int]) -> None:
    conn.executemany(
        "UPDATE silenced_changes SET reported = 1 WHERE change_id = ?",
        [(i,) for i in change_ids],
    )


# -- events on the record ----------------------------------------------------------------------


def add_note(
    conn: sqlite3.Connection,
    *,
    instrument: str,
    at: datetime,
    kind: str,
    text: str,
    reset_baselines: bool,
    by: str,
    recorded_at_s: float,
) -> int:
    cur = conn.execute(
        "INSERT INTO notes (instrument, at, kind, text, reset_baselines, by_name, recorded_at_s)"
        " VALUES (?, ?, ?, ?, ?, ?, ?)",
        (instrument, to_text(at), kind, text, int(reset_baselines), by, recorded_at_s),
    )
    return int(cur.lastrowid or 0)


def _note(r: sqlite3.Row) -> Note:
    return Note(
        note_id=r["note_id"],
        instrument=r["instrument"],
        at=from_text(r["at"]),
        kind=r["kind"],
        text=r["text"],
        reset_baselines=bool(r["reset_baselines"]),
        by=r["by_name"],
    )


def notes_between(
    conn: sqlite3.Connection, *, instrument: str, start: datetime, end: datetime
) -> list[Note]:
    """Events of ``instrument`` at times in ``[start, end)``, oldest first."""
    rows = conn.execute(
        "SELECT * FROM notes WHERE instrument = ? AND at >= ? AND at < ? ORDER BY at, note_id",
        (instrument, to_text(start), to_text(end)),
    ).fetchall()
    return [_note(r) for r in rows]


def last_reset(conn: sqlite3.Connection, *, instrument: str, before: datetime) -> datetime | None:
    """The time of the latest baseline-resetting event at or before ``before``, or None."""
    row = conn.execute(
        "SELECT max(at) FROM notes WHERE instrument = ? AND reset_baselines = 1 AND at <= ?",
        (instrument, to_text(before)),
    ).fetchone()
    return None if row is None or row[0] is None else from_text(row[0])


# -- the health-log lines the daemon owes for commands ------------------------------------------


def log_entry(conn: sqlite3.Connection, entry_kind: str, at_s: float, /, **fields: Any) -> None:
    """Queue the health-log event ``entry_kind`` with ``fields`` for the daemon to write."""
    conn.execute(
        "INSERT INTO control_log (at_s, kind, fields_json) VALUES (?, ?, ?)",
        (at_s, entry_kind, json.dumps(fields, sort_keys=True, default=str)),
    )


def unlogged(conn: sqlite3.Connection) -> list[LogEntry]:
    rows = conn.execute(
        "SELECT entry_id, at_s, kind, fields_json FROM control_log WHERE logged = 0"
        " ORDER BY entry_id"
    ).fetchall()
    return [LogEntry(entry_id=r[0], at_s=r[1], kind=r[2], fields=json.loads(r[3])) for r in rows]


def mark_logged(conn: sqlite3.Connection, entry_ids: Sequence[int]) -> None:
    conn.executemany(
        "UPDATE control_log SET logged = 1 WHERE entry_id = ?", [(i,) for i in entry_ids]
    )


# -- the history as the rules read it ---------------------------------------------------------


class ResettableHistory(StoreHistory):
    """``StoreHistory`` that starts again after the latest baseline-resetting event.

    For a run acquired at ``before``, only runs acquired at or after the latest note with
    ``reset_baselines`` at or before ``before`` count: baselines, Westgard rules and drift
    forecasts read ``series`` and see no run of the old column; EWMA and CUSUM read
    ``trend_state`` and start again from the first run after the event.

    Args:
        conn: an open state database.
        instrument: whose events count (the config's ``instrument.name``).
        applies_to: as ``StoreHistory``.
    """

    def __init__(
        self, conn: sqlite3.Connection, *, instrument: str, applies_to: Sequence[str] = ()
    ) -> None:
        super().__init__(conn, applies_to=applies_to)
        self._instrument = instrument

    def _since(self, before: datetime) -> datetime | None:
        return last_reset(self._conn, instrument=self._instrument, before=before)

    def series(self, metric: str, *, before: datetime, limit: int) -> list[HistoryPoint]:
        points = super().series(metric, before=before, limit=limit)
        since = self._since(before)
        if since is None:
            return points
        # The newest ``limit`` runs before ``before``: those before the event are its oldest
        # part, and every run left out is older still, so dropping them is exact.
        return [p for p in points if p.acquired_at >= since]

    def trend_state(self, check: str, path: str, *, before: datetime) -> TrendState | None:
        since = self._since(before)
        if since is None:
            return super().trend_state(check, path, before=before)
        row = self._conn.execute(
            "SELECT spec, n_runs, ewma, cusum_hi, cusum_lo FROM trend_states"
            " WHERE check_name = ? AND path = ? AND acquired_at < ? AND acquired_at >= ?"
            " ORDER BY acquired_at DESC, run_id DESC LIMIT 1",
            (check, path, to_text(before), to_text(since)),
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
