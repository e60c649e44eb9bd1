"""Empty the local publish queue into PostgreSQL: a thread of its own, batches, back-off.

Each round (``Publisher.step``) first queues the alert changes and finished deliveries that the
local store holds and the queue does not (one short SQLite write, only when there are any), then
sends the oldest ``central.batch_max`` entries in ONE PostgreSQL transaction and, once that has
committed, removes them from the queue. A kill between the two sends the batch again; every
write on the central side is an upsert by its key, so the second send changes nothing. A failed
round closes the connection and waits ``retry_first_wait``, doubling up to ``retry_max_wait``:
while the server is down the thread makes one connection attempt per wait and nothing else, and
the worker that judges runs and the delivery of alerts never wait for it (they do not know it).
"""

from __future__ import annotations

import math
import sqlite3
import threading
import time
from typing import TYPE_CHECKING, Any

import structlog

from watcher.central import queue, schema
from watcher.central.url import masked, scrub
from watcher.store import db

if TYPE_CHECKING:
    from collections.abc import Callable
    from pathlib import Path

    import psycopg

    from watcher.config import Central

log = structlog.get_logger("watcher.central.publish")

# Alert changes and deliveries that no run's commit carries are looked for this often.
SCAN_EVERY_S = 2.0
_STATEMENT_TIMEOUT_MS = 30_000  # a server that stops answering mid-batch fails the round


def connect(url: str, connect_timeout_s: float) -> psycopg.Connection[Any]:
    """A connection in autocommit (transactions are explicit), with the time limits that make a
    vanished server an error instead of a hang: libpq's ``connect_timeout`` (whole seconds, at
    least 2: PostgreSQL documentation 34.1.2), TCP keepalives and a statement timeout."""
    import psycopg

    return psycopg.connect(
        url,
        autocommit=True,
        connect_timeout=max(2, math.ceil(connect_timeout_s)),
        application_name="ionwarden",
        keepalives=1,
        keepalives_idle=10,
        keepalives_interval=5,
        keepalives_count=3,
        options=f"-c statement_timeout={_STATEMENT_TIMEOUT_MS}",
    )


def _number(value: Any) -> float | None:
    """A finding's value as a number (true/false as 1/0), None when it is none."""
    if isinstance(value, bool | int | float):
        return float(value)
    return None


def _metric_rows(payload: dict[str, Any]) -> list[tuple[Any, ...]]:
    rows = []
    for metric, value in payload["metrics"].items():
        number = None if value is None else float(value)  # true/false as 1/0
        rows.append(
            (payload["instrument"], metric, payload["acquired_at"], payload["file_key"], number)
        )
    return rows


_RUN_UPSERT = (
    "INSERT INTO runs (instrument, file_key, file_name, path, size, mtime_ns, sha256,"
    " acquired_at, judged_at, status, error, metrics, findings, source, local_run_id)"
    " VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s)"
    " ON CONFLICT (instrument, file_key) DO UPDATE SET file_name = excluded.file_name,"
    " acquired_at = excluded.acquired_at, judged_at = excluded.judged_at,"
    " status = excluded.status, error = excluded.error, metrics = excluded.metrics,"
    " findings = excluded.findings, source = excluded.source,"
    " local_run_id = excluded.local_run_id, published_at = now()"
)


def _apply_runs(conn: psycopg.Connection[Any], source: str, runs: list[dict[str, Any]]) -> None:
    from psycopg.types.json import Jsonb

    with conn.cursor() as cur:
        cur.executemany(
            _RUN_UPSERT,
            [
                (
                    p["instrument"],
                    p["file_key"],
                    p["file_name"],
                    p["path"],
                    p["size"],
                    p["mtime_ns"],
                    p["sha256"],
                    p["acquired_at"],
                    p["judged_at"],
                    p["status"],
                    p["error"],
                    Jsonb(p["metrics"]),
                    Jsonb(p["findings"]),
                    source,
                    p["local_run_id"],
                )
                for p in runs
            ],
        )
        # A run published again (a duplicate send, a re-judged file) replaces its metric rows.
        cur.execute(
            "DELETE FROM run_metrics AS m USING unnest(%s::text[], %s::text[]) AS k(i, f)"
            " WHERE m.instrument = k.i AND m.file_key = k.f",
            ([p["instrument"] for p in runs], [p["file_key"] for p in runs]),
        )
        with cur.copy(
            "COPY run_metrics (instrument, metric, acquired_at, file_key, value) FROM STDIN"
        ) as copy:
            for p in runs:
                for row in _metric_rows(p):
                    copy.write_row(row)


def apply(
    conn: psycopg.Connection[Any],
    source: str,
    entries: list[queue.Entry],
    profiles: dict[str, dict[str, Any]] | None = None,
) -> None:
    """Write ``entries`` into the central tables inside the caller's transaction; upserts by
    key throughout, so applying the same entries twice leaves the same rows. ``profiles``:
    instrument -> its profile (``watcher.central.profile``), stored with the instrument."""
    from psycopg.types.json import Jsonb

    instruments: set[str] = set()
    # The runs of a batch go in three statements whatever their number (a row per statement
    # was 30 ms a run, bound by round trips): the upserts pipelined, one DELETE of their old
    # metric rows, one COPY of the new ones. Alert changes and messages follow in queue order;
    # they touch other tables than the runs, so the result is the same as one by one.
    runs: dict[tuple[str, str], dict[str, Any]] = {}
    for entry in entries:
        if entry.kind == "run":
            p = entry.payload
            runs[(p["instrument"], p["file_key"])] = p  # a later entry of the same run wins
    if runs:
        _apply_runs(conn, source, list(runs.values()))
        instruments.update(key[0] for key in runs)
    for entry in entries:
        p = entry.payload
        instruments.add(p["instrument"])
        if entry.kind == "alert":
            conn.execute(
                "INSERT INTO alert_events (instrument, source, seq, at, check_name, subject,"
                " channel, action, severity, previous_severity, message, run_file)"
                " VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s)"
                " ON CONFLICT (instrument, source, seq) DO NOTHING",
                (
                    p["instrument"],
                    source,
                    entry.seq,
                    p["at"],
                    p["check"],
                    p["subject"],
                    p["channel"],
                    p["action"],
                    p["severity"],
                    p["previous_severity"],
                    p["message"],
                    p["run_file"],
                ),
            )
            key = (p["instrument"], p["check"], p["subject"], p["channel"])
            if p["action"] == "cleared":
                conn.execute(
                    "DELETE FROM open_alerts WHERE instrument = %s AND check_name = %s"
                    " AND subject = %s AND channel = %s",
                    key,
                )
            else:
                conn.execute(
                    "INSERT INTO open_alerts (instrument, check_name, subject, channel, severity,"
                    " raised_at, message, metric, value, run_file) VALUES (%s, %s, %s, %s, %s, %s,"
                    " %s, %s, %s, %s) ON CONFLICT (instrument, check_name, subject, channel)"
                    " DO UPDATE SET severity = excluded.severity, raised_at = excluded.raised_at,"
                    " message = excluded.message, metric = excluded.metric,"
                    " value = excluded.value,"
                    " run_file = coalesce(excluded.run_file, open_alerts.run_file)",
                    (
                        *key,
                        p["severity"],
                        p["raised_at"],
                        p["message"],
                        p["metric"],
                        _number(p["value"]),
                        p["run_file"],
                    ),
                )
        elif entry.kind == "message":
            conn.execute(
                "INSERT INTO messages (instrument, source, message_id, channel, kind, ref, title,"
                " status, attempts, created_at, finished_at) VALUES (%s, %s, %s, %s, %s, %s, %s,"
                " %s, %s, %s, %s) ON CONFLICT (instrument, source, message_id) DO UPDATE SET"
                " status = excluded.status, attempts = excluded.attempts,"
                " finished_at = excluded.finished_at",
                (
                    p["instrument"],
                    source,
                    p["message_id"],
                    p["channel"],
                    p["kind"],
                    p["ref"],
                    p["title"],
                    p["status"],
                    p["attempts"],
                    p["created_at"],
                    p["finished_at"],
                ),
            )
    profiles = profiles or {}
    for name in sorted(instruments):
        profile = profiles.get(name)
        conn.execute(
            "INSERT INTO instruments (instrument, last_published_at, profile)"
            " VALUES (%s, now(), %s) ON CONFLICT (instrument) DO UPDATE SET"
            " last_published_at = now(), profile = coalesce(excluded.profile, instruments.profile)",
            (name, None if profile is None else Jsonb(profile)),
        )


class Publisher:
    """The publishing thread of one daemon: ``start()``, ``wake()`` after a commit, ``stop()``.

    Args:
        central: the ``central`` config (URL, time limits, batch size, back-off).
        state_dir: the local store; the publisher opens its own connection to it.
        instrument: the name the deliveries it queues are published under.
        clock: epoch seconds for the back-off (tests pass a controllable one).
        connector: opens a PostgreSQL connection from (url, connect timeout s).
        profile: the instrument's profile (``watcher.central.profile.profile_of``).
    """

    def __init__(
        self,
        central: Central,
        state_dir: Path,
        instrument: str,
        *,
        clock: Callable[[], float] = time.time,
        connector: Callable[[str, float], psycopg.Connection[Any]] = connect,
        profile: dict[str, Any] | None = None,
    ) -> None:
        if central.url is None:
            raise ValueError("central.url is not set")
        self.url = central.url
        self.where = masked(central.url)
        self.central = central
        self.state_dir = state_dir
        self.instrument = instrument
        self._clock = clock
        self._connector = connector
        self._profiles = {} if profile is None else {instrument: profile}
        self._local: sqlite3.Connection | None = None
        self._pg: psycopg.Connection[Any] | None = None
        self._source: str | None = None
        self._failures = 0
        self._next_attempt_s = 0.0
        self._next_scan_s = 0.0
        self._wake = threading.Event()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self.attempts = 0  # connection attempts, for the tests and the bench
        self.published = 0  # entries the central store committed
        self.last_error: str | None = None

    # -- thread -----------------------------------------------------------------------------

    def start(self) -> None:
        if self._thread is not None:
            return
        self._thread = threading.Thread(target=self._run, name="ionwarden-central", daemon=True)
        self._thread.start()

    def wake(self) -> None:
        """New entries were committed: publish them now unless a back-off wait is running."""
        self._wake.set()

    def stop(self, timeout_s: float = 5.0) -> None:
        """End the thread; what is still queued stays queued for the next start."""
        self._stop.set()
        self._wake.set()
        thread, self._thread = self._thread, None
        if thread is not None:
            thread.join(timeout_s)
        if thread is None or not thread.is_alive():
            self.close()

    def close(self) -> None:
        pg, self._pg = self._pg, None
        if pg is not None:
            try:
                pg.close()
            except Exception as exc:  # closing a broken connection may fail; it is gone anyway
                log.debug("central.close_failed", error=type(exc).__name__)
        local, self._local = self._local, None
        if local is not None:
            local.close()

    def _run(self) -> None:
        while not self._stop.is_set():
            try:
                wait_s = self.step()
            except Exception:  # never let the thread die: the queue would only grow
                log.exception("central.round_failed")
                wait_s = self.central.retry_max_wait_s
            self._wake.wait(max(0.0, wait_s))
            self._wake.clear()
        self.close()

    # -- one round --------------------------------------------------------------------------

    def step(self) -> float:
        """Queue changes the scan finds, then publish one batch if no back-off wait runs;
        returns how long to wait before the next round (0: more is waiting)."""
        now_s = self._clock()
        local = self._local_conn()
        if now_s >= self._next_scan_s:
            self._next_scan_s = now_s + SCAN_EVERY_S
            self._scan(local, now_s)
        if now_s < self._next_attempt_s:
            return min(self._next_attempt_s - now_s, SCAN_EVERY_S)
        entries = queue.pending(local, self.central.batch_max)
        if not entries:
            return SCAN_EVERY_S
        try:
            pg = self._pg_conn()
            with pg.transaction():
                apply(pg, self._source_id(local), entries, self._profiles)
        except Exception as exc:  # psycopg.Error, OSError: the server, the network, the schema
            return self._failed(exc, now_s, waiting=len(entries))
        with db.write(local):
            queue.remove(local, [e.seq for e in entries])
        self.published += len(entries)
        if self._failures:
            log.info("central.caught_up", central=self.where, after_failures=self._failures)
        self._failures = 0
        self.last_error = None
        return 0.0 if len(entries) == self.central.batch_max else SCAN_EVERY_S

    def _scan(self, local: sqlite3.Connection, now_s: float) -> None:
        try:
            if queue.changes_waiting(local):
                with db.write(local):
                    queue.queue_changes(local, self.instrument, now_s)
        except sqlite3.Error as exc:  # the store is busy or full: the next scan tries again
            log.warning("central.scan_failed", error=str(exc))

    def _failed(self, exc: BaseException, now_s: float, *, waiting: int) -> float:
        self._drop_pg()
        self._failures += 1
        wait_s: float = min(
            self.central.retry_first_wait_s * 2 ** min(self._failures - 1, 30),
            self.central.retry_max_wait_s,
        )
        self._next_attempt_s = now_s + wait_s
        error = scrub(f"{type(exc).__name__}: {exc}".strip().splitlines()[0], self.url)
        if self._failures == 1 or error != self.last_error:  # once per outage and per new reason
            log.warning(
                "central.unreachable",
                central=self.where,
                error=error,
                waiting=waiting,
                retry_in_s=round(wait_s, 1),
            )
        self.last_error = error
        return wait_s

    def _drop_pg(self) -> None:
        pg, self._pg = self._pg, None
        if pg is not None:
            try:
                pg.close()
            except Exception as exc:  # the connection is broken already
                log.debug("central.close_failed", error=type(exc).__name__)

    def _pg_conn(self) -> psycopg.Connection[Any]:
        if self._pg is not None and not self._pg.closed:
            return self._pg
        self.attempts += 1
        pg = self._connector(self.url, self.central.connect_timeout_s)
        try:
            found = schema.upgrade(pg, self.where)
        except BaseException:
            pg.close()
            raise
        if found != schema.SCHEMA_VERSION:
            log.info(
                "central.schema_upgraded",
                central=self.where,
                found=found,
                version=schema.SCHEMA_VERSION,
            )
        log.info("central.connected", central=self.where)
        self._pg = pg
        return pg

    def _local_conn(self) -> sqlite3.Connection:
        if self._local is None:
            self._local = db.connect(self.state_dir, daemon=True)
        return self._local

    def _source_id(self, local: sqlite3.Connection) -> str:
        if self._source is None:
            self._source = queue.store_id(local)
        return self._source
