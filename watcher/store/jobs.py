"""The job table: one row per file identity (path, size, mtime_ns) and its state, plus daemon state.

States run ``queued -> measuring -> done | failed``. A row left ``measuring`` by a crash goes back
to ``queued`` at start-up (``requeue_interrupted``), so a run interrupted at any moment is measured
again and judged once: the verdict, the alert step and ``done`` are committed in one transaction by
the caller. Every function that writes expects to run inside ``db.write(conn)``; none of them
parses, hashes or sends anything.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING

from watcher.store.db import path_text, path_value, register_schema
from watcher.store.rows import columns, from_row

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Sequence


class JobState(StrEnum):
    QUEUED = "queued"
    MEASURING = "measuring"
    DONE = "done"
    FAILED = "failed"


SCHEMA = """
CREATE TABLE IF NOT EXISTS jobs (
    id INTEGER PRIMARY KEY,
    path TEXT NOT NULL,
    size INTEGER NOT NULL,
    mtime_ns INTEGER NOT NULL,
    sha256 TEXT,
    state TEXT NOT NULL CHECK (state IN ('queued', 'measuring', 'done', 'failed')),
    first_seen_s REAL NOT NULL,
    updated_s REAL NOT NULL,
    attempts INTEGER NOT NULL DEFAULT 0,
    run_id INTEGER,
    duplicate_of INTEGER REFERENCES jobs(id),
    outcome TEXT,
    verdict BLOB, -- unused since schema version 2 (always NULL): the runs table holds verdicts
    incomplete TEXT,
    UNIQUE (path, size, mtime_ns)
);
CREATE INDEX IF NOT EXISTS jobs_state ON jobs (state, first_seen_s);
CREATE INDEX IF NOT EXISTS jobs_sha256 ON jobs (sha256);
CREATE TABLE IF NOT EXISTS daemon_state (
    key TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
"""

register_schema("jobs", SCHEMA)


@dataclass(frozen=True, slots=True, kw_only=True)
class Job:
    """One row of the job table."""

    id: int
    path: Path
    size: int
    mtime_ns: int
    sha256: str | None
    state: JobState
    first_seen_s: float
    attempts: int
    run_id: int | None
    duplicate_of: int | None
    outcome: str | None
    incomplete: str | None = None  # set: never completed; judge unreadable with this text


def _job(row: sqlite3.Row) -> Job:
    return from_row(Job, row, path=Path(path_text(row["path"])), state=JobState(row["state"]))


_COLUMNS = columns(Job)


def enqueue(
    conn: sqlite3.Connection,
    path: Path,
    size: int,
    mtime_ns: int,
    now_s: float,
    *,
    incomplete: str | None = None,
) -> int | None:
    """Add a settled file as ``queued``; returns its id, or None when this identity is known.

    ``incomplete`` marks a file that never completed: the worker judges it unreadable with that
    text instead of measuring it, through the same exactly-once path.
    """
    cur = conn.execute(
        "INSERT OR IGNORE INTO jobs"
        " (path, size, mtime_ns, state, first_seen_s, updated_s, incomplete)"
        " VALUES (?, ?, ?, 'queued', ?, ?, ?)",
        (path_value(path), size, mtime_ns, now_s, now_s, incomplete),
    )
    return cur.lastrowid if cur.rowcount == 1 else None


def known(conn: sqlite3.Connection, path: Path, size: int, mtime_ns: int) -> bool:
    """True when this exact identity already has a row (any state)."""
    row = conn.execute(
        "SELECT 1 FROM jobs WHERE path = ? AND size = ? AND mtime_ns = ?",
        (path_value(path), size, mtime_ns),
    ).fetchone()
    return row is not None


def known_identities(conn: sqlite3.Connection) -> set[tuple[str, int, int]]:
    """Every (path, size, mtime_ns) in the table, for reconciling a folder scan in one query."""
    rows = conn.execute("SELECT path, size, mtime_ns FROM jobs").fetchall()
    return {(path_text(r[0]), r[1], r[2]) for r in rows}


def requeue_interrupted(conn: sqlite3.Connection, now_s: float) -> int:
    """Start-up: rows left ``measuring`` by a crash go back to ``queued``; returns how many."""
    cur = conn.execute(
        "UPDATE jobs SET state = 'queued', updated_s = ? WHERE state = 'measuring'", (now_s,)
    )
    return cur.rowcount


def claim_next(conn: sqlite3.Connection, now_s: float) -> Job | None:
    """Take the oldest queued job (by first_seen_s, then mtime) and mark it ``measuring``."""
    row = conn.execute(
        f"SELECT {_COLUMNS} FROM jobs WHERE state = 'queued'"  # noqa: S608 - constant columns
        " ORDER BY first_seen_s, mtime_ns, id LIMIT 1"
    ).fetchone()
    if row is None:
        return None
    conn.execute(
        "UPDATE jobs SET state = 'measuring', attempts = attempts + 1, updated_s = ? WHERE id = ?",
        (now_s, row["id"]),
    )
    return _job(row)


def release(conn: sqlite3.Connection, job_id: int, now_s: float) -> None:
    """Put a job being measured back to ``queued`` (shutdown while measuring)."""
    conn.execute(
        "UPDATE jobs SET state = 'queued', updated_s = ? WHERE id = ? AND state = 'measuring'",
        (now_s, job_id),
    )


def same_content(conn: sqlite3.Connection, sha256: str, job_id: int) -> Job | None:
    """An earlier finished job with this content hash (under any name), or None."""
    row = conn.execute(
        f"SELECT {_COLUMNS} FROM jobs WHERE sha256 = ? AND id != ?"  # noqa: S608 - constant columns
        " AND state = 'done' AND duplicate_of IS NULL ORDER BY id LIMIT 1",
        (sha256, job_id),
    ).fetchone()
    return _job(row) if row is not None else None


def finish(
    conn: sqlite3.Connection,
    job_id: int,
    now_s: float,
    *,
    state: JobState,
    outcome: str,
    run_id: int | None = None,
    duplicate_of: int | None = None,
    sha256: str | None = None,
) -> None:
    """Mark a job ``done`` or ``failed`` (in the same transaction as its verdict)."""
    conn.execute(
        "UPDATE jobs SET state = ?, outcome = ?, run_id = ?, duplicate_of = ?,"
        " sha256 = coalesce(?, sha256), updated_s = ? WHERE id = ?",
        (str(state), outcome, run_id, duplicate_of, sha256, now_s, job_id),
    )


def recent_judged(conn: sqlite3.Connection, limit: int = 3) -> list[int]:
    """The run ids of the last jobs judged (not duplicates), newest first.

    One worker finishes one job at a time, so a kill between a commit and its health-log line
    can only affect the newest; re-writing a few is idempotent (the log skips known run ids).
    """
    rows = conn.execute(
        "SELECT run_id FROM jobs WHERE state = 'done' AND duplicate_of IS NULL"
        " AND run_id IS NOT NULL ORDER BY updated_s DESC, id DESC LIMIT ?",
        (limit,),
    ).fetchall()
    return [int(r[0]) for r in rows]


def recent(conn: sqlite3.Connection, *, limit: int = 10) -> list[tuple[Job, Path | None]]:
    """The last ``limit`` jobs changed, newest first, each with the path of the job it
    duplicates (None when it is no copy): what ``status`` shows as files that arrived."""
    prefixed = ", ".join(f"j.{name.strip()}" for name in _COLUMNS.split(","))
    rows = conn.execute(
        f"SELECT {prefixed}, t.path AS twin_path FROM jobs AS j"  # noqa: S608 - constant columns
        " LEFT JOIN jobs AS t ON t.id = j.duplicate_of"
        " ORDER BY j.updated_s DESC, j.id DESC LIMIT ?",
        (limit,),
    ).fetchall()
    return [
        (_job(r), None if r["twin_path"] is None else Path(path_text(r["twin_path"]))) for r in rows
    ]


def finished_before(conn: sqlite3.Connection, before_s: float) -> list[Job]:
    """Jobs ``done`` or ``failed`` whose last change is older than ``before_s``, oldest first
    (the candidates for pruning; read by the index on ``updated_s`` of schema version 2)."""
    rows = conn.execute(
        f"SELECT {_COLUMNS} FROM jobs WHERE updated_s < ?"  # noqa: S608 - constant columns
        " AND state IN ('done', 'failed') ORDER BY updated_s, id",
        (before_s,),
    ).fetchall()
    return [_job(row) for row in rows]


def delete(conn: sqlite3.Connection, job_ids: Sequence[int]) -> int:
    """Delete these job rows, keeping any that a remaining row names as ``duplicate_of``.

    A kept duplicate still points at its original (the foreign key), and deleting both at once
    is fine. Returns how many rows went. The runs they judged stay in the history.
    """
    if not job_ids:
        return 0
    conn.execute("CREATE TEMP TABLE IF NOT EXISTS doomed (id INTEGER PRIMARY KEY)")
    conn.execute("DELETE FROM doomed")
    conn.executemany("INSERT OR IGNORE INTO doomed (id) VALUES (?)", [(i,) for i in job_ids])
    cur = conn.execute(
        "DELETE FROM jobs WHERE id IN (SELECT id FROM doomed) AND id NOT IN ("
        " SELECT duplicate_of FROM jobs WHERE duplicate_of IS NOT NULL"
        " AND id NOT IN (SELECT id FROM doomed))"
    )
    conn.execute("DELETE FROM doomed")
    return cur.rowcount


def get(conn: sqlite3.Connection, job_id: int) -> Job | None:
    row = conn.execute(
        f"SELECT {_COLUMNS} FROM jobs WHERE id = ?",  # noqa: S608 - constant columns
        (job_id,),
    ).fetchone()
    return _job(row) if row is not None else None


def counts(conn: sqlite3.Connection) -> dict[str, int]:
    """Rows per state (states with no rows are 0)."""
    out = {str(s): 0 for s in JobState}
    for state, n in conn.execute("SELECT state, count(*) FROM jobs GROUP BY state"):
        out[state] = n
    return out


def last_arrival_s(conn: sqlite3.Connection) -> float | None:
    """When the newest job was first seen (the heartbeat's "last run arrived")."""
    row = conn.execute("SELECT max(first_seen_s) FROM jobs").fetchone()
    return None if row is None or row[0] is None else float(row[0])


def get_state(conn: sqlite3.Connection, key: str) -> str | None:
    row = conn.execute("SELECT value FROM daemon_state WHERE key = ?", (key,)).fetchone()
    return None if row is None else str(row[0])


def set_state(conn: sqlite3.Connection, key: str, value: str) -> None:
    conn.execute(
        "INSERT INTO daemon_state (key, value) VALUES (?, ?)"
        " ON CONFLICT (key) DO UPDATE SET value = excluded.value",
        (key, value),
    )


HEALTH_PENDING_KEY = "health_pending"


def health_pending(conn: sqlite3.Connection) -> list[int]:
    """Run ids whose health-log line is committed to be written but not yet known written."""
    text = get_state(conn, HEALTH_PENDING_KEY)
    return [int(v) for v in json.loads(text)] if text else []


def update_health_pending(
    conn: sqlite3.Connection, *, add: int | None = None, written: Sequence[int] = ()
) -> None:
    """Note a run's line as owed (``add``, in the transaction that commits the run: the note
    survives a health folder that cannot be written, a full disk and a kill) and strike off the
    runs whose lines are ``written``; one read and one write of the note."""
    done = set(written)
    pending = [r for r in health_pending(conn) if r not in done]
    if add is not None and add not in pending:
        pending.append(add)
    set_state(conn, HEALTH_PENDING_KEY, json.dumps(pending))
