"""The notifier's side of people's controls: hold back quiet alerts, summarize at the end, log.

``hold_back`` runs inside the daemon's write transaction, after the state machine stepped a
channel: alert changes covered by a silence or a maintenance window are kept in the store
(``silenced_changes``) instead of reaching the channel; the alert states themselves were stepped
as always, so runs stay judged, recorded and shown. ``tick`` (every second, outside any
transaction) queues the one summary message per channel when a silence or window ends, and
writes the health-log events the commands left (``control_log``): only the daemon writes there.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import TYPE_CHECKING

import structlog

from watcher.notify import alert_state as machine
from watcher.notify import quiet
from watcher.notify.alert_text import Item, item_line
from watcher.notify.control_text import ClearedKey, cleared_what, silence_summary
from watcher.records import AlertAction
from watcher.store import controls, db, jobs, outbox

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Callable

    from watcher.config import Channel, Config

log = structlog.get_logger("watcher.notify.controls")

MAINTENANCE_CHECKED_KEY = "controls.maintenance_checked_s"  # windows ended before are told
_CHECKED_EVERY_S = 3600.0  # move the mark on at least hourly, so the look-back stays short
_LOOKBACK_S = 2 * 86400.0  # windows that ended while the daemon was off longer are not told


def active_periods(
    conn: sqlite3.Connection, config: Config, now_s: float
) -> list[quiet.QuietPeriod]:
    """Silences and maintenance windows in force now."""
    silences = controls.silences(conn, instrument=config.instrument.name, active_at_s=now_s)
    return quiet.active_periods(config, silences, now_s)


def hold_back(
    conn: sqlite3.Connection,
    config: Config,
    channel: Channel,
    items: list[Item],
    now_s: float,
    *,
    run_file: str | None,
    periods: list[quiet.QuietPeriod] | None = None,
) -> list[Item]:
    """The items that may reach ``channel`` now; the quiet ones are stored for the summary."""
    if not items:
        return items
    periods = active_periods(conn, config, now_s) if periods is None else periods
    if not periods:
        return items
    kept: list[Item] = []
    for item in items:
        f = item.finding
        if not quiet.is_quiet(periods, f.check, f.subject, now_s):
            kept.append(item)
            continue
        controls.add_silenced_change(
            conn,
            at_s=now_s,
            instrument=config.instrument.name,
            channel=channel.name,
            check=f.check,
            subject=f.subject,
            action=str(item.action),
            severity=f.severity,
            line=item_line(item, run_file),
        )
        log.info(
            "alert.held_back",
            channel=channel.name,
            check=f.check,
            subject=f.subject,
            action=str(item.action),
        )
    return kept


def quiet_now(conn: sqlite3.Connection, config: Config, now_s: float) -> Callable[[str, str], bool]:
    """A test ``(check, subject) -> quiet now`` for the reminder round."""
    periods = active_periods(conn, config, now_s)
    return lambda check, subject: quiet.is_quiet(periods, check, subject, now_s)


# -- every second -------------------------------------------------------------------------------


def tick(
    conn: sqlite3.Connection,
    config: Config,
    now_s: float,
    *,
    write_event: Callable[..., None],
) -> bool:
    """Summaries of quiet times that ended, and the commands' health-log events.

    Reads first and writes only when there is something to do (a write per second would be an
    fsync per second). Returns whether a message was queued (the caller wakes the worker).
    """
    checked = jobs.get_state(conn, MAINTENANCE_CHECKED_KEY)
    since_s = now_s if checked is None else max(float(checked), now_s - _LOOKBACK_S)
    ends = [
        p
        for p in quiet.maintenance_periods(config, since_s - 86400.0, now_s)
        if since_s < p.end_s <= now_s
    ]
    due = controls.ended_unsummarized(conn, now_s)
    entries = controls.unlogged(conn)
    stale = checked is None or now_s - float(checked) >= _CHECKED_EVERY_S
    if not due and not ends and not entries and not stale:
        return False
    queued = False
    with db.write(conn):
        ended: list[tuple[quiet.QuietPeriod, controls.Silence | None]] = [(p, None) for p in ends]
        # read again inside the transaction: a command may have ended one meanwhile
        ended += [(quiet.silence_period(s), s) for s in controls.ended_unsummarized(conn, now_s)]
        for period, silence in sorted(ended, key=lambda e: e[0].end_s):
            queued |= _summarize(conn, config, period, now_s)
            if silence is not None:
                controls.mark_summarized(conn, silence.silence_id)
                controls.log_entry(
                    conn,
                    "silence.ended",
                    now_s,
                    silence_id=silence.silence_id,
                    reason=silence.reason,
                    ended_early=silence.ended_early_s is not None,
                )
            else:
                controls.log_entry(
                    conn, "maintenance.ended", now_s, window=period.source, reason=period.reason
                )
        jobs.set_state(conn, MAINTENANCE_CHECKED_KEY, repr(now_s))
        entries = controls.unlogged(conn)
    for entry in entries:
        write_event(entry.kind, **entry.fields)
    if entries:
        with db.write(conn):
            controls.mark_logged(conn, [e.entry_id for e in entries])
    return queued


def _summarize(
    conn: sqlite3.Connection, config: Config, period: quiet.QuietPeriod, now_s: float
) -> bool:
    """Queue the end-of-quiet message on every channel that has something to tell."""
    instrument = config.instrument.name
    still_quiet = [p for p in active_periods(conn, config, now_s) if p != period]

    def mine(check: str, subject: str) -> bool:
        # In this period's scope, and not held on by another silence or window still in force.
        probe = quiet.QuietPeriod(
            start_s=now_s - 1, end_s=now_s + 1, checks=period.checks, subject=period.subject
        )
        return probe.covers(check, subject, now_s) and not quiet.is_quiet(
            still_quiet, check, subject, now_s
        )

    queued = False
    for channel in config.alerts.channels:
        changes = [
            c
            for c in controls.unreported_changes(conn, instrument=instrument, channel=channel.name)
            if period.start_s <= c.at_s <= period.end_s and mine(c.check, c.subject)
        ]
        open_alerts = [
            a
            for a in outbox.load_alerts(conn, instrument=instrument, channel=channel.name)
            if mine(a.check, a.subject)
        ]
        open_keys = {(a.check, a.subject) for a in open_alerts}
        told_open = open_alerts  # each alert still open is told once, in one message
        cleared: dict[tuple[str, str], ClearedKey] = {}
        for c in changes:
            key = (c.check, c.subject)
            if key in open_keys:
                continue
            opened = any(
                o.action == AlertAction.RAISE and (o.check, o.subject) == key for o in changes
            )
            if c.action == AlertAction.CLEAR or key in cleared:
                worst = max(
                    (o.severity for o in changes if (o.check, o.subject) == key),
                    key=lambda s: s.rank,
                )
                cleared[key] = ClearedKey(
                    what=cleared_what(*key), worst=str(worst), opened_during=opened
                )
        if not told_open and not cleared:
            controls.mark_reported(conn, [c.change_id for c in changes])
            continue
        items = [Item(action=AlertAction.REMIND, finding=a.state.finding) for a in told_open]
        text = silence_summary(
            instrument=instrument,
            source=period.source,
            reason=period.reason,
            at=datetime.fromtimestamp(now_s, UTC),
            timezone=config.instrument.timezone,
            still_open=items,
            cleared=list(cleared.values()),
            changes_while_quiet=len(changes),
        )
        for a in told_open:
            outbox.save_alert(
                conn,
                instrument=instrument,
                check=a.check,
                subject=a.subject,
                channel=channel.name,
                state=machine.summary_sent(a.state, now_s),
                run_file=None,
            )
        message_id = outbox.enqueue(
            conn,
            channel=channel.name,
            kind="summary",
            ref=f"quiet-end:{period.source}:{period.end_s:.3f}",
            created_at_s=now_s,
            title=text.title,
            body=text.body,
            notify_type=text.notify_type,
        )
        controls.mark_reported(conn, [c.change_id for c in changes])
        if message_id is not None:
            queued = True
            log.info("message.queued", message_id=message_id, channel=channel.name, kind="summary")
    return queued
