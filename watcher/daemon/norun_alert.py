"""The heartbeat: no new run for ``expect_run_every`` during active hours is an event.

It is off during a maintenance window that covers every check (``maintenance:`` in the config),
and the wait starts again at the window's end: nobody queues runs during a planned stop.

The state ("missed" raised or not) lives in the SQLite file, so a restart neither repeats the
event nor forgets it; the next arrival clears it. The daemon's main loop calls ``check`` each
tick and ``resume`` inside the transaction that queues new runs.
"""

from __future__ import annotations

from datetime import datetime, time
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

import structlog

from watcher.notify import quiet
from watcher.records import DaemonEvent
from watcher.store import db, jobs

if TYPE_CHECKING:
    import sqlite3

    from watcher.config import Config
    from watcher.notify.notifier import Notifier

log = structlog.get_logger("watcher.daemon")

STATE_KEY = DaemonEvent.NORUN_MISSED.value


def in_active_hours(now_s: float, tz_name: str, hours: tuple[time, time] | None) -> bool:
    """True when ``now_s`` falls in the local window ``(start, end)`` (may wrap midnight)."""
    if hours is None:
        return True
    local = datetime.fromtimestamp(now_s, ZoneInfo(tz_name))
    minute = local.hour * 60 + local.minute
    start = hours[0].hour * 60 + hours[0].minute
    end = hours[1].hour * 60 + hours[1].minute
    if start <= end:
        return start <= minute < end
    return minute >= start or minute < end


def check(
    conn: sqlite3.Connection,
    notifier: Notifier,
    config: Config,
    now_s: float,
    last_arrival_s: float,
) -> None:
    """Raise the "missed" event once when the queue has been silent too long in active hours."""
    every_s = config.alerts.expect_run_every_s
    if every_s is None or now_s - last_arrival_s < every_s:
        return
    if not in_active_hours(now_s, config.instrument.timezone, config.alerts.active_hours):
        return
    if config.maintenance and quiet.quiet_queue_expected(config, now_s, every_s):
        return  # a planned stop: no runs are expected (the silence of the queue is the plan)
    if jobs.get_state(conn, STATE_KEY) == "1":
        return
    silent_s = round(now_s - last_arrival_s)
    with db.write(conn):
        jobs.set_state(conn, STATE_KEY, "1")
        notifier.record_event(conn, DaemonEvent.NORUN_MISSED, now_s, silent_s=silent_s)
    log.warning("heartbeat.missed", silent_s=silent_s, expected_every_s=every_s)
    notifier.write_event(DaemonEvent.NORUN_MISSED, silent_s=silent_s)


def resume(conn: sqlite3.Connection, notifier: Notifier, now_s: float) -> bool:
    """Clear a raised "missed" state; call inside the write that queues the new runs.

    Returns whether it was raised, so that the caller announces the resumption after commit.
    """
    if jobs.get_state(conn, STATE_KEY) != "1":
        return False
    jobs.set_state(conn, STATE_KEY, "0")
    notifier.record_event(conn, DaemonEvent.NORUN_RESUMED, now_s)
    return True


def announce_resumed(notifier: Notifier) -> None:
    """Log and write the resumption (after the transaction of ``resume`` committed)."""
    log.info("heartbeat.resumed")
    notifier.write_event(DaemonEvent.NORUN_RESUMED)
