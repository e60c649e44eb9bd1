"""The schema's versions: version 1 is the tables the owners register, then ordered migrations.

``PRAGMA user_version`` holds the version a database is at. Version 1 is what each table owner
(history, jobs, outbox) registers through ``db.register_schema``; that text is frozen, because a
store written before versioning (``user_version`` 0 with those tables) is taken as version 1.
Every later change is one ``Migration`` appended to ``MIGRATIONS``: it takes a database at
``version - 1`` to ``version``. ``db.connect`` runs the missing ones, oldest first, in one
transaction with the new ``user_version``, so a store is either wholly upgraded or untouched.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Callable


@dataclass(frozen=True, slots=True, kw_only=True)
class Migration:
    """One step of the schema, from ``version - 1`` to ``version``.

    Attributes:
        version: the version the database is at once this step ran.
        summary: what changes and why, for DEVELOPERS.md and the daemon log.
        sql: statements separated by ``;`` (no ``;`` inside a statement), or a function for a
            change SQL alone cannot express; it runs inside the upgrade transaction and must not
            commit.
    """

    version: int
    summary: str
    sql: str | Callable[[sqlite3.Connection], None]

    def apply(self, conn: sqlite3.Connection) -> None:
        if callable(self.sql):
            self.sql(conn)
            return
        for statement in self.sql.split(";"):
            if statement.strip():
                conn.execute(statement)


BASE_VERSION = 1  # the registered tables, as they were when versioning began

MIGRATIONS: tuple[Migration, ...] = (
    Migration(
        version=2,
        summary="drop the pickled verdicts from jobs; index jobs by update time for pruning",
        # The verdict column stays (always NULL from now on): DROP COLUMN needs SQLite 3.35,
        # newer than some distributions' libsqlite3 the daemon links against.
        sql="""
        UPDATE jobs SET verdict = NULL WHERE verdict IS NOT NULL;
        CREATE INDEX IF NOT EXISTS jobs_by_updated ON jobs (updated_s)
        """,
    ),
    Migration(
        version=3,
        summary="trend_states: the EWMA and CUSUM statistics after each run, continued by the next",
        # One row per run and (check, metric path): the rules read the latest earlier one, so
        # EWMA and CUSUM span the whole history at the cost of one indexed lookup.
        sql="""
        CREATE TABLE IF NOT EXISTS trend_states (
            run_id INTEGER NOT NULL REFERENCES runs (run_id) ON DELETE CASCADE,
            check_name TEXT NOT NULL,
            path TEXT NOT NULL,
            acquired_at TEXT NOT NULL,
            spec TEXT NOT NULL,
            n_runs INTEGER NOT NULL,
            ewma REAL,
            cusum_hi REAL,
            cusum_lo REAL,
            PRIMARY KEY (run_id, check_name, path)
        );
        CREATE INDEX IF NOT EXISTS trend_states_by_time
            ON trend_states (check_name, path, acquired_at)
        """,
    ),
    Migration(
        version=4,
        summary="central_queue: what is still to be published to the central store, in order",
        # Filled in the same transaction as the run (or the alert change, or the delivery) it
        # carries, emptied only after the central store committed it: at-least-once, in seq
        # order. The two *_seen tables remember what was queued already, so a scan of the
        # alert states and deliveries queues each change once. store_id tells this store's
        # entries from another's on the central side (a store made anew starts seq at 1 again).
        sql="""
        CREATE TABLE IF NOT EXISTS central_queue (
            seq INTEGER PRIMARY KEY AUTOINCREMENT,
            kind TEXT NOT NULL CHECK (kind IN ('run', 'alert', 'message')),
            payload TEXT NOT NULL,
            queued_at_s REAL NOT NULL
        );
        CREATE TABLE IF NOT EXISTS central_alerts_seen (
            instrument TEXT NOT NULL,
            check_name TEXT NOT NULL,
            subject TEXT NOT NULL,
            channel TEXT NOT NULL,
            severity TEXT NOT NULL,
            PRIMARY KEY (instrument, check_name, subject, channel)
        );
        CREATE TABLE IF NOT EXISTS central_messages_seen (
            message_id INTEGER PRIMARY KEY
        );
        INSERT OR IGNORE INTO daemon_state (key, value)
            VALUES ('central.store_id', lower(hex(randomblob(16))))
        """,
    ),
    Migration(
        version=5,
        summary="people's controls: acknowledgements, silences, events on the record, their log",
        # alert_state.acked_at_s: the state machine's own input (no reminders while set). The
        # other tables are written by the CLI commands while the daemon runs; control_log is
        # the queue of health-log lines the daemon owes for them (only the daemon writes there).
        sql="""
        ALTER TABLE alert_state ADD COLUMN acked_at_s REAL;
        CREATE TABLE IF NOT EXISTS acks (
            ack_id INTEGER PRIMARY KEY AUTOINCREMENT,
            at_s REAL NOT NULL,
            instrument TEXT NOT NULL,
            check_name TEXT NOT NULL,
            subject TEXT NOT NULL,
            severity TEXT NOT NULL,
            raised_at_s REAL NOT NULL,
            by_name TEXT NOT NULL,
            note TEXT,
            run_file TEXT
        );
        CREATE INDEX IF NOT EXISTS acks_by_key ON acks (instrument, check_name, subject, at_s);
        CREATE TABLE IF NOT EXISTS silences (
            silence_id INTEGER PRIMARY KEY AUTOINCREMENT,
            instrument TEXT NOT NULL,
            check_name TEXT,
            subject TEXT,
            reason TEXT NOT NULL,
            by_name TEXT NOT NULL,
            start_s REAL NOT NULL,
            end_s REAL NOT NULL,
            ended_early_s REAL,
            summarized INTEGER NOT NULL DEFAULT 0
        );
        CREATE TABLE IF NOT EXISTS silenced_changes (
            change_id INTEGER PRIMARY KEY AUTOINCREMENT,
            at_s REAL NOT NULL,
            instrument TEXT NOT NULL,
            channel TEXT NOT NULL,
            check_name TEXT NOT NULL,
            subject TEXT NOT NULL,
            action TEXT NOT NULL,
            severity TEXT NOT NULL,
            line TEXT NOT NULL,
            reported INTEGER NOT NULL DEFAULT 0
        );
        CREATE TABLE IF NOT EXISTS notes (
            note_id INTEGER PRIMARY KEY AUTOINCREMENT,
            instrument TEXT NOT NULL,
            at TEXT NOT NULL,
            kind TEXT NOT NULL,
            text TEXT NOT NULL,
            reset_baselines INTEGER NOT NULL DEFAULT 0,
            by_name TEXT NOT NULL,
            recorded_at_s REAL NOT NULL
        );
        CREATE INDEX IF NOT EXISTS notes_by_time ON notes (instrument, at);
        CREATE TABLE IF NOT EXISTS control_log (
            entry_id INTEGER PRIMARY KEY AUTOINCREMENT,
            at_s REAL NOT NULL,
            kind TEXT NOT NULL,
            fields_json TEXT NOT NULL,
            logged INTEGER NOT NULL DEFAULT 0
        )
        """,
    ),
)


def target_version(migrations: tuple[Migration, ...]) -> int:
    """The version the migrations lead to; each must take the previous version one step on."""
    expected = BASE_VERSION + 1
    for migration in migrations:
        if migration.version != expected:
            raise RuntimeError(
                f"schema migrations out of order: expected version {expected}, "
                f"got {migration.version} ({migration.summary})"
            )
        expected += 1
    return expected - 1


SCHEMA_VERSION = target_version(MIGRATIONS)  # checked at import: a gap fails every start


def pending(found_version: int, steps: tuple[Migration, ...] = MIGRATIONS) -> tuple[Migration, ...]:
    """The steps a database at ``found_version`` (>= 1) still needs, oldest first."""
    return tuple(m for m in steps if m.version > found_version)
