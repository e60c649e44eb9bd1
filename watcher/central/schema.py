"""The central PostgreSQL schema: versioned and migrated in one transaction, like the local one.

``ionwarden_schema`` holds the version. Each ``STEPS`` entry takes the database one version on;
``upgrade`` runs the missing ones under a transaction-level advisory lock, so daemons starting at
once upgrade it once. One ``instrument`` column keys every table. ``run_metrics`` holds one row
per run and metric, keyed (instrument, metric, acquired_at, file_key): "the last 30 days of one
metric for one instrument" is one range scan of its primary key.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from watcher.errors import StoreError

if TYPE_CHECKING:
    import psycopg

# pg_advisory_xact_lock key: any fixed 64-bit number; this one is "ionwarde" in ASCII.
_LOCK_KEY = 0x696F6E7761726465

STEPS: tuple[tuple[int, str, str], ...] = (
    (
        1,
        "runs, their metrics, alert changes, open alerts and delivered messages per instrument",
        """
        CREATE TABLE IF NOT EXISTS runs (
            instrument text NOT NULL,
            file_key text NOT NULL,
            file_name text NOT NULL,
            path text NOT NULL,
            size bigint NOT NULL,
            mtime_ns bigint NOT NULL,
            sha256 text NOT NULL,
            acquired_at timestamptz NOT NULL,
            judged_at timestamptz NOT NULL,
            status text NOT NULL,
            error text,
            metrics jsonb NOT NULL,
            findings jsonb NOT NULL,
            source text NOT NULL,
            local_run_id bigint NOT NULL,
            published_at timestamptz NOT NULL DEFAULT now(),
            PRIMARY KEY (instrument, file_key)
        );
        CREATE INDEX IF NOT EXISTS runs_by_time ON runs (instrument, acquired_at);
        CREATE TABLE IF NOT EXISTS run_metrics (
            instrument text NOT NULL,
            metric text NOT NULL,
            acquired_at timestamptz NOT NULL,
            file_key text NOT NULL,
            value double precision,
            PRIMARY KEY (instrument, metric, acquired_at, file_key),
            FOREIGN KEY (instrument, file_key) REFERENCES runs ON DELETE CASCADE
        );
        CREATE INDEX IF NOT EXISTS run_metrics_by_run ON run_metrics (instrument, file_key);
        CREATE TABLE IF NOT EXISTS alert_events (
            instrument text NOT NULL,
            source text NOT NULL,
            seq bigint NOT NULL,
            at timestamptz NOT NULL,
            check_name text NOT NULL,
            subject text NOT NULL,
            channel text NOT NULL,
            action text NOT NULL,
            severity text NOT NULL,
            previous_severity text,
            message text,
            run_file text,
            PRIMARY KEY (instrument, source, seq)
        );
        CREATE INDEX IF NOT EXISTS alert_events_by_time ON alert_events (instrument, at);
        CREATE TABLE IF NOT EXISTS open_alerts (
            instrument text NOT NULL,
            check_name text NOT NULL,
            subject text NOT NULL,
            channel text NOT NULL,
            severity text NOT NULL,
            raised_at timestamptz,
            message text,
            metric text,
            value double precision,
            run_file text,
            PRIMARY KEY (instrument, check_name, subject, channel)
        );
        CREATE TABLE IF NOT EXISTS messages (
            instrument text NOT NULL,
            source text NOT NULL,
            message_id bigint NOT NULL,
            channel text NOT NULL,
            kind text NOT NULL,
            ref text NOT NULL,
            title text NOT NULL,
            status text NOT NULL,
            attempts integer NOT NULL,
            created_at timestamptz,
            finished_at timestamptz,
            PRIMARY KEY (instrument, source, message_id)
        );
        CREATE TABLE IF NOT EXISTS instruments (
            instrument text PRIMARY KEY,
            last_published_at timestamptz NOT NULL,
            profile jsonb
        )
        """,
    ),
)

SCHEMA_VERSION = STEPS[-1][0]


def version(conn: psycopg.Connection[Any]) -> int:
    """The central schema's version (0: no ionwarden tables yet)."""
    row = conn.execute("SELECT to_regclass('ionwarden_schema') IS NOT NULL").fetchone()
    if row is None or not row[0]:
        return 0
    found = conn.execute("SELECT max(version) FROM ionwarden_schema").fetchone()
    return 0 if found is None or found[0] is None else int(str(found[0]))


def upgrade(conn: psycopg.Connection[Any], where: str) -> int:
    """Bring the central database to ``SCHEMA_VERSION`` (one transaction); returns the version
    found. ``where`` names the database in errors (the masked URL).

    Raises:
        StoreError: the database is at a newer version than this ionwarden knows.
    """
    with conn.transaction():
        conn.execute("SELECT pg_advisory_xact_lock(%s)", (_LOCK_KEY,))
        conn.execute("CREATE TABLE IF NOT EXISTS ionwarden_schema (version integer NOT NULL)")
        found = version(conn)
        if found > SCHEMA_VERSION:
            raise StoreError(
                f"central store {where} has schema version {found}, newer than version "
                f"{SCHEMA_VERSION} that this ionwarden writes: install that version again"
            )
        for step, _summary, sql in STEPS:
            if step <= found:
                continue
            for statement in sql.split(";"):
                if statement.strip():
                    conn.execute(statement)
            conn.execute("DELETE FROM ionwarden_schema")
            conn.execute("INSERT INTO ionwarden_schema (version) VALUES (%s)", (step,))
    return found
