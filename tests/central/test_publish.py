"""Publishing the local queue into a real PostgreSQL server (tests/helpers/postgres.py): runs,
alert changes and delivered messages arrive once, in order, through outages and duplicates.

The local side is a real SQLite store written the way the daemon writes it (history, the
notify stage's alert step and the queue in one transaction); the central side is read back with
plain SQL and with ``watcher.central.reader``.
"""

from __future__ import annotations

import json
import socket
from typing import TYPE_CHECKING, Any

import psycopg
import pytest

from tests.helpers.central import LocalStore
from tests.helpers.clock import Clock
from tests.helpers.records import make_finding
from watcher.central import queue, reader, schema
from watcher.central.publish import Publisher, apply
from watcher.config import Central
from watcher.notify.healthlog import run_key
from watcher.records import Severity, Status
from watcher.store import db, history, outbox

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.postgres import Postgres

INSTRUMENT = "Kestrel-2 Q-TOF"
T0 = 1_795_000_000.0  # 2026-11-17, any fixed epoch


def central(url: str, **kw: Any) -> Central:
    settings: dict[str, Any] = {"url": url, "retry_first_wait_s": 1.0, "retry_max_wait_s": 60.0}
    settings.update(kw)
    return Central(**settings)


def rows(url: str, sql: str, params: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    with psycopg.connect(url, autocommit=True) as conn:
        return conn.execute(sql, params).fetchall()  # type: ignore[arg-type]


def drain(publisher: Publisher, clock: Clock, rounds: int = 50) -> None:
    for _ in range(rounds):
        if publisher.step() > 0 and not publisher_has_work(publisher):
            return
        clock.advance(0.1)


def publisher_has_work(publisher: Publisher) -> bool:
    conn = db.connect(publisher.state_dir)
    try:
        return queue.length(conn) > 0
    finally:
        conn.close()


@pytest.fixture
def local(tmp_path: Path) -> LocalStore:
    return LocalStore(tmp_path / "state", Clock(T0), INSTRUMENT)


def test_runs_alert_changes_and_metrics_arrive_once(local: LocalStore, facility: str) -> None:
    """Three runs (ok, drift warning, ok again) give three runs, a raised and a cleared alert
    event and no open alert; the run's key is the health log's run_key."""
    drift = make_finding(Severity.WARNING, value=3.6)
    local.run("QC_001.mzML")
    local.run("QC_002.mzML", drift)
    local.run("QC_003.mzML")
    # 3 runs + raised + cleared, in commit order
    assert [e.kind for e in queue.pending(local.conn, 100)] == [
        "run",
        "run",
        "alert",
        "run",
        "alert",
    ]
    publisher = Publisher(central(facility), local.state_dir, INSTRUMENT, clock=local.clock)
    drain(publisher, local.clock)
    assert local.queued() == 0
    got = rows(facility, "SELECT file_name, status FROM runs ORDER BY acquired_at")
    assert got == [("QC_001.mzML", "ok"), ("QC_002.mzML", "warning"), ("QC_003.mzML", "ok")]
    actions = rows(facility, "SELECT action, severity FROM alert_events ORDER BY seq")
    assert actions == [("raised", "warning"), ("cleared", "warning")]
    assert rows(facility, "SELECT count(*) FROM open_alerts") == [(0,)]
    # The file identity is the one the health log writes (watcher.notify.healthlog.run_key).
    stored = history.get_run(local.conn, 1)
    assert stored is not None
    key = run_key(stored.path, stored.size, stored.mtime_ns, stored.sha256)
    assert rows(facility, "SELECT file_key FROM runs WHERE file_name = 'QC_001.mzML'") == [(key,)]
    # Every stored metric of the run is a row of run_metrics, true/false as 1/0.
    assert len(stored.metrics) >= 10
    n_rows = rows(facility, "SELECT count(*) FROM run_metrics WHERE file_key = %s", (key,))
    assert n_rows == [(len(stored.metrics),)]
    one = "SELECT value FROM run_metrics WHERE metric = %s AND file_key = %s"
    assert rows(facility, one, ("calibrant.siloxane-445.median_ppm", key)) == [(0.5,)]
    assert rows(facility, one, ("expected_ion.caffeine.found", key)) == [(1.0,)]
    publisher.close()


def test_an_open_alert_is_shown_by_the_reader(local: LocalStore, facility: str) -> None:
    """A critical drift left open: the reader lists it with the instrument's last run."""
    local.run("QC_001.mzML")
    local.run("QC_002.mzML", make_finding(Severity.CRITICAL, value=6.2))
    publisher = Publisher(central(facility), local.state_dir, INSTRUMENT, clock=local.clock)
    drain(publisher, local.clock)
    conn = reader.open_reader(facility)
    try:
        (summary,) = reader.instruments(conn)
        assert summary.instrument == INSTRUMENT
        assert summary.last_file == "QC_002.mzML"
        assert summary.last_status is Status.CRITICAL
        assert summary.runs == 2
        assert (summary.open_alerts, summary.worst_open) == (1, Severity.CRITICAL)
        (alert,) = reader.open_alerts(conn, INSTRUMENT)
        assert alert.check == "calibration drift"
        assert alert.channels == ("lab-chat",)
        runs = reader.runs(conn, INSTRUMENT)
        assert [r.file_name for r in runs] == ["QC_002.mzML", "QC_001.mzML"]
    finally:
        conn.close()
    publisher.close()


def test_delivered_messages_are_published_by_the_scan(local: LocalStore, facility: str) -> None:
    """A message the delivery worker marked delivered reaches the central messages table."""
    local.run("QC_001.mzML", make_finding(Severity.WARNING))
    (message,) = outbox.messages(local.conn, statuses=(outbox.DeliveryStatus.PENDING,))
    with db.write(local.conn):
        outbox.mark_delivered(local.conn, message.message_id, local.clock())
    publisher = Publisher(central(facility), local.state_dir, INSTRUMENT, clock=local.clock)
    drain(publisher, local.clock)
    got = rows(facility, "SELECT instrument, channel, kind, status FROM messages")
    assert got == [(INSTRUMENT, "lab-chat", "alert", "delivered")]
    publisher.step()  # a later scan queues nothing again
    assert local.queued() == 0
    assert rows(facility, "SELECT count(*) FROM messages") == [(1,)]
    publisher.close()


def test_a_duplicate_publish_changes_nothing(local: LocalStore, facility: str) -> None:
    """A crash after PostgreSQL committed a batch and before the local queue forgot it sends
    the batch again: every row is there once, unchanged."""
    local.run("QC_001.mzML")
    local.run("QC_002.mzML", make_finding(Severity.WARNING))
    entries = queue.pending(local.conn, 100)
    source = queue.store_id(local.conn)
    with psycopg.connect(facility, autocommit=True) as pg:
        schema.upgrade(pg, "test")
        with pg.transaction():
            apply(pg, source, entries)  # committed centrally, still queued locally: the crash
    publisher = Publisher(central(facility), local.state_dir, INSTRUMENT, clock=local.clock)
    drain(publisher, local.clock)
    assert rows(facility, "SELECT count(*) FROM runs") == [(2,)]
    assert rows(facility, "SELECT count(*) FROM alert_events") == [(1,)]
    assert rows(facility, "SELECT count(*) FROM open_alerts") == [(1,)]
    assert rows(facility, "SELECT count(*) FROM run_metrics")[0][0] > 0
    metric_rows = rows(
        facility, "SELECT count(*), count(DISTINCT (metric, file_key)) FROM run_metrics"
    )
    assert metric_rows[0][0] == metric_rows[0][1]  # no metric of a run twice
    publisher.close()


def _refused_port() -> int:
    """A 127.0.0.1 port with nothing listening (bound, then closed): connections are refused."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def test_an_hour_of_refused_connections_backs_off_and_loses_nothing(
    local: LocalStore, pg: Postgres
) -> None:
    """Network refused for an hour of simulated time: the publisher tries once per back-off
    wait (1 s doubling to 60 s: 7 tries reach the cap, then one a minute, about 66 in all, not
    one per round), keeps every entry queued, and publishes them all once the server answers."""
    database = pg.new_database()
    port = _refused_port()
    dead = f"postgresql://lab@127.0.0.1:{port}/{database}"
    for i in range(5):
        local.run(f"S{i:02d}.mzML")
    publisher = Publisher(central(dead), local.state_dir, INSTRUMENT, clock=local.clock)
    start = local.clock()
    rounds = 0
    while local.clock() - start < 3600:
        wait_s = publisher.step()
        rounds += 1
        local.clock.advance(min(max(wait_s, 0.5), 5.0))  # woken early by runs, as in the daemon
    # 1+2+4+...+32 = 63 s for the first 6 tries, then one per 60 s for the rest of the hour
    assert 60 <= publisher.attempts <= 68, publisher.attempts
    assert rounds > publisher.attempts * 3  # most rounds did not touch the network
    assert local.queued() == 5
    assert publisher.last_error is not None
    assert "refused" in publisher.last_error.lower()
    publisher.close()
    # The server answers (same database, now through the socket): everything arrives once.
    live = Publisher(central(pg.url(database)), local.state_dir, INSTRUMENT, clock=local.clock)
    drain(live, local.clock)
    got = rows(pg.url(database), "SELECT file_name FROM runs ORDER BY acquired_at")
    assert got == [(f"S{i:02d}.mzML",) for i in range(5)]
    live.close()


def test_server_down_then_killed_mid_publish(local: LocalStore, tmp_path: Path) -> None:
    """A server that is down when publishing starts, comes up, and is killed (SIGKILL) between
    batches: the queue keeps what was not committed, and after it returns every run is there
    exactly once, in order."""
    from tests.helpers.postgres import make_cluster

    own = make_cluster()
    try:
        database = own.new_database()
        url = own.url(database)
        own.stop()
        for i in range(30):
            local.run(f"R{i:03d}.mzML")
        publisher = Publisher(
            central(url, batch_max=7), local.state_dir, INSTRUMENT, clock=local.clock
        )
        assert publisher.step() > 0  # down at start: a back-off wait, nothing lost
        assert local.queued() == 30
        assert publisher.attempts == 1
        own.start()
        local.clock.advance(2)
        assert publisher.step() == 0.0  # one batch of 7 committed, more waiting
        assert local.queued() == 23
        own.kill()  # mid-publish: the connection the publisher holds is dead now
        local.clock.advance(0.1)
        assert publisher.step() > 0  # the batch fails, stays queued
        assert local.queued() == 23
        own.start()
        local.clock.advance(5)
        drain(publisher, local.clock)
        got = rows(url, "SELECT file_name FROM runs ORDER BY acquired_at")
        assert got == [(f"R{i:03d}.mzML",) for i in range(30)]
        publisher.close()
    finally:
        own.close()


def test_payload_is_plain_json(local: LocalStore) -> None:
    """Queue entries are JSON objects without NaN (PostgreSQL's jsonb refuses NaN)."""
    local.run("QC_001.mzML")
    raw = local.conn.execute("SELECT payload FROM central_queue").fetchone()[0]
    assert "NaN" not in raw
    assert json.loads(raw)["instrument"] == INSTRUMENT
