"""The notify stage's entry point for the daemon: verdicts and events in; outbox, health log out.

``record_verdict`` and ``record_event`` run inside the daemon's write transaction and only read and
write rows; sending happens on the delivery worker's own thread and connection, so a hanging
receiver never holds up measuring.
"""

from __future__ import annotations

import threading
import time
from datetime import UTC, date, datetime, timedelta
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

import structlog

from watcher.notify import alert_state as machine
from watcher.notify import controls
from watcher.notify.alert_text import Item, Text, compose
from watcher.notify.control_text import with_quiet_hint
from watcher.notify.healthlog import HealthLog
from watcher.records import AlertAction, DaemonEvent, Finding, Severity, Status, Verdict, shown
from watcher.store import db, jobs, outbox

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Callable, Mapping
    from pathlib import Path

    from watcher.config import Channel, Config
    from watcher.store.history import RunRow

log = structlog.get_logger("watcher.notify.notifier")

_PRUNE_EVERY_S = 3600.0
FIRST_WATCH_KEY = "notify.first_watch_s"  # epoch seconds of the store's first daemon start


def day_end_s(day: date, timezone: str) -> float:
    """Epoch seconds at which the local ``day`` ends (DST days are 23 or 25 h long)."""
    tz = ZoneInfo(timezone)
    return datetime.combine(day + timedelta(days=1), datetime.min.time(), tz).timestamp()


def unreadable_finding(verdict: Verdict) -> Finding:
    """An unreadable run as a critical finding-like alert, keyed on subject ``file``.

    The message line adds what to do (``alert_text.action_hint``): re-export a file that is bad
    in itself, mend the transfer for one that stalled incomplete (intake's ``incomplete:``)."""
    return Finding(
        check=machine.UNREADABLE_CHECK,
        severity=Severity.CRITICAL,
        metric="file",
        subject="file",
        message=verdict.error or "the run file could not be read",
        value=None,
        limit="a readable run file",
        rule="read",
    )


def heartbeat_finding(fields: dict[str, object]) -> Finding:
    since = fields.get("since") or fields.get("last_run_at")
    text = "no new run arrived in the expected time"
    if since:
        text += f" (last run {since})"
    return Finding(
        check=machine.HEARTBEAT_CHECK,
        severity=Severity.WARNING,
        metric="runs",
        subject="runs",
        message=text,
        value=None,
        limit="a run every expect_run_every",
        rule="heartbeat",
    )


class Notifier:
    """Facade the daemon calls; see the method docstrings for which run inside its transaction.

    Args:
        config: the lab config (channels, alert timing, time zone, health log).
        state_dir: folder of the state database; the health log defaults to ``<state_dir>/health``.
        clock: epoch seconds (tests pass a controllable one).
        backoff_base_s, backoff_max_s: delivery retry waits; default ``alerts.retry_first_wait``
            and ``alerts.retry_max_wait`` (tests make them short).
        poll_s: how often the worker looks at the outbox when not woken.
    """

    def __init__(
        self,
        config: Config,
        state_dir: Path,
        *,
        clock: Callable[[], float] = time.time,
        backoff_base_s: float | None = None,
        backoff_max_s: float | None = None,
        poll_s: float = 1.0,
    ) -> None:
        self.config = config
        self.state_dir = state_dir
        self._clock = clock
        self._tz = ZoneInfo(config.instrument.timezone)
        self.health = HealthLog(
            config.health_log.dir or state_dir / "health",
            timezone=config.instrument.timezone,
            keep_days=config.health_log.keep_days,
            clock=clock,
        )
        self._backoff = (
            config.alerts.retry_first_wait_s if backoff_base_s is None else backoff_base_s,
            config.alerts.retry_max_wait_s if backoff_max_s is None else backoff_max_s,
        )
        self._poll_s = poll_s
        self._worker: object | None = None  # deliver.DeliveryWorker, imported lazily
        self._reader: sqlite3.Connection | None = None
        self._reader_lock = threading.Lock()
        self._last_prune_s: float | None = None

    # -- start-up ---------------------------------------------------------------------------

    def validate_channels(self) -> None:
        """Every channel URL through apprise ``add()``; raises DeliveryError naming the channel."""
        from watcher.notify import deliver

        for channel in self.config.alerts.channels:
            deliver.make_target(channel, self.config.alerts)

    # -- inside the daemon's write transaction -----------------------------------------------

    def record_verdict(
        self, conn: sqlite3.Connection, verdict: Verdict, run_id: int, now_s: float
    ) -> None:
        """Step every alert this run touches and queue one message per channel that changed.

        Runs inside the caller's write transaction (no BEGIN/COMMIT here). Idempotent by run_id.
        """
        ref = f"run:{run_id}"
        if outbox.has_message(conn, ref):
            return
        readable = verdict.status is not Status.UNREADABLE
        findings = list(verdict.findings)
        if not readable:
            findings.append(unreadable_finding(verdict))
        file_name = shown(verdict.run_file.path.name)  # alert text and the alert row
        configured = {c.name for c in self.config.checks}
        # The verdict's time is the acquisition time, else the file's mtime, else the judgement
        # (``watcher.records.run_time``); the message says which one it shows.
        at = verdict.acquired_at
        if verdict.metrics is not None and verdict.metrics.acquired_at is not None:
            at_what = "acquired"
        elif verdict.run_file.mtime_ns > 0:
            at_what = "file written"
        else:
            at_what = "judged"
        # The clearing run's values, for the OK-again lines ("back to +1.2 ppm").
        measured = verdict.metrics.flat() if verdict.metrics is not None else {}
        for channel in self.config.alerts.channels:
            wanted: dict[tuple[str, str], Finding] = {}
            for f in findings:
                key = (f.check, f.subject)
                if machine.passes(channel, f) and (
                    key not in wanted or f.severity.rank > wanted[key].severity.rank
                ):
                    wanted[key] = f
            items = self._step_channel(
                conn,
                channel,
                wanted,
                now_s,
                run_file=file_name,
                may_clear=lambda key: machine.may_clear(
                    key, verdict.evaluated, configured, readable=readable
                ),
                measured=measured,
            )
            if items:
                text = compose(
                    instrument=self.config.instrument.name,
                    run_file=file_name,
                    at=at,
                    timezone=self.config.instrument.timezone,
                    status=str(verdict.status),
                    items=items,
                    at_what=at_what,
                )
                self._enqueue(conn, channel, "alert", ref, now_s, text, items)

    def record_event(
        self, conn: sqlite3.Connection, kind: DaemonEvent, now_s: float, **fields: object
    ) -> None:
        """Alerts from daemon events, inside the caller's write transaction.

        ``heartbeat.missed``/``heartbeat.resumed`` raise/clear the heartbeat alert;
        ``config.rejected`` queues a warning message; other kinds only go to the health log
        (the caller writes them there with ``write_event``).
        """
        at = datetime.fromtimestamp(now_s, UTC)
        if kind == DaemonEvent.STARTED and jobs.get_state(conn, FIRST_WATCH_KEY) is None:
            # The first start of this store: days before it were never watched.
            jobs.set_state(conn, FIRST_WATCH_KEY, repr(now_s))
        if kind in (DaemonEvent.NORUN_MISSED, DaemonEvent.NORUN_RESUMED):
            finding = heartbeat_finding(fields)
            key = (finding.check, finding.subject)
            for channel in self.config.alerts.channels:
                wanted = {key: finding} if kind == DaemonEvent.NORUN_MISSED else {}
                if wanted and not machine.passes(channel, finding):
                    continue
                items = self._step_channel(
                    conn,
                    channel,
                    wanted,
                    now_s,
                    run_file=None,
                    may_clear=lambda key: key[0] == machine.HEARTBEAT_CHECK,
                    only=key,
                )
                if items:
                    text = compose(
                        instrument=self.config.instrument.name,
                        run_file=None,
                        at=at,
                        timezone=self.config.instrument.timezone,
                        status="no runs" if kind == DaemonEvent.NORUN_MISSED else "runs again",
                        items=items,
                    )
                    self._enqueue(conn, channel, "event", f"{kind}:{now_s:.3f}", now_s, text, items)
        elif kind == DaemonEvent.STORE_RECOVERED:
            title = f"{self.config.instrument.name}: state store writable again"
            body = (
                "The state database can be written again; runs that arrived meanwhile are "
                f"judged now. It had failed with: {fields.get('error') or 'see the daemon log'}"
            )
            # the channels that got the direct "not writable" alert (those taking critical)
            self._enqueue_event(conn, kind, now_s, title, body, Severity.CRITICAL, "success")
        elif kind == DaemonEvent.CONFIG_REJECTED:
            problem = str(fields.get("error") or fields.get("problems") or "see the daemon log")
            title = f"{self.config.instrument.name}: config reload rejected"
            body = f"The new config was not loaded; the old one stays in force.\n{problem}"
            self._enqueue_event(conn, kind, now_s, title, body, Severity.WARNING, "warning")

    def _enqueue_event(
        self,
        conn: sqlite3.Connection,
        kind: DaemonEvent,
        now_s: float,
        title: str,
        body: str,
        severity: Severity,
        notify_type: str,
    ) -> None:
        """One event message (not about a run) to every channel that takes ``severity``."""
        for channel in self.config.alerts.channels:
            if severity.rank < channel.min_severity.rank:
                continue
            outbox.enqueue(
                conn,
                channel=channel.name,
                kind="event",
                ref=f"{kind}:{now_s:.3f}",
                created_at_s=now_s,
                title=title,
                body=body[:1000],
                notify_type=notify_type,
            )

    # -- after commit -------------------------------------------------------------------------

    def write_health(self, verdict: Verdict, run_id: int) -> None:
        """The run's health-log record (after the commit); idempotent by run_id."""
        self.health.write_run(verdict, run_id)
        self.wake()

    def write_stored_health(self, row: RunRow) -> None:
        """The health-log record of a run as stored (after the commit, or replayed at start-up)."""
        self.health.write_stored_run(row)
        self.wake()

    def write_event(self, kind: DaemonEvent | str, **fields: object) -> None:
        """One daemon event in the health log, best effort: a health folder that cannot be
        written (permissions, a full disk) must not stop a start, a stop or a delivery; the
        runs' own lines are owed and retried by the pipeline instead."""
        try:
            self.health.write_event(kind, **fields)
        except OSError as exc:
            log.warning(
                "healthlog.write_failed",
                event_kind=str(kind),
                error=shown(f"{exc.strerror or exc}: {exc.filename or ''}"),
            )

    def send_direct(self, title: str, body: str, *, notify_type: str = "failure") -> None:
        """Send one message to every channel now, past the outbox, in a thread of its own.

        For the one alert the outbox cannot carry: "the state store is not writable" (a full
        disk, a file-size limit). Queuing it would need the very write that fails, so it goes
        straight to apprise, once, without retries; the daemon log and the systemd STATUS=
        line say the same, and the outbox carries the "writable again" message once it works.
        """
        from watcher.notify import deliver

        channels = [
            c for c in self.config.alerts.channels if Severity.CRITICAL.rank >= c.min_severity.rank
        ]

        def run() -> None:
            for channel in channels:
                try:
                    target = deliver.make_target(channel, self.config.alerts)
                    ok, word = deliver.send_text(
                        target,
                        title=title,
                        body=body,
                        notify_type=notify_type,
                        timeout_s=self.config.alerts.timeout_s,
                    )
                except Exception as exc:  # a failed direct send must not take a thread down
                    ok, word = False, repr(exc)
                if ok:
                    log.info("message.delivered", channel=channel.name, message_kind="direct")
                else:
                    log.warning("message.failed", channel=channel.name, error=f"direct: {word}")

        threading.Thread(target=run, name="ionwarden-direct-alert", daemon=True).start()

    def wake(self) -> None:
        """Tell the delivery worker that new messages were committed."""
        worker = self._worker
        if worker is not None:
            worker.wake()  # type: ignore[attr-defined]

    # -- timers ----------------------------------------------------------------------------------

    def tick(self, conn: sqlite3.Connection, now_s: float) -> None:
        """Reminders that are due, the daily digest at ``digest_at``, health-log retention.

        Opens its own short write transactions; call it outside any transaction.
        """
        remind_every_s = self.config.alerts.remind_every_s
        if remind_every_s is not None and self.config.alerts.channels:
            with db.write(conn):
                self._remind(conn, now_s, remind_every_s)
        controls.tick(conn, self.config, now_s, write_event=self.write_event)
        if self.config.digest_at:
            self._maybe_digest(conn, now_s)
        if self._last_prune_s is None or now_s - self._last_prune_s >= _PRUNE_EVERY_S:
            self._last_prune_s = now_s
            for path in self.health.prune():
                log.info("healthlog.pruned", file=path.name)
        self.wake()

    # -- delivery -------------------------------------------------------------------------------

    def start_delivery(self) -> None:
        """Start the worker thread (it opens its own connection)."""
        from watcher.notify import deliver

        if self._worker is not None:
            return
        targets = [deliver.make_target(c, self.config.alerts) for c in self.config.alerts.channels]
        worker = deliver.DeliveryWorker(
            targets,
            self.config.alerts,
            self.state_dir,
            clock=self._clock,
            on_event=self.write_event,
            render_plot=self._render_plot if self.config.alerts.plots else None,
            backoff_base_s=self._backoff[0],
            backoff_max_s=self._backoff[1],
            poll_s=self._poll_s,
            instrument=self.config.instrument.name,
        )
        worker.start()
        self._worker = worker

    def stop_delivery(self, timeout_s: float = 5.0) -> None:
        worker = self._worker
        self._worker = None
        if worker is not None:
            worker.stop(timeout_s)  # type: ignore[attr-defined]
        with self._reader_lock:
            if self._reader is not None:
                self._reader.close()
                self._reader = None

    def pending_count(self) -> int:
        """Deliveries not yet successful (waiting or retrying)."""
        with self._reader_lock:
            if self._reader is None:
                self._reader = db.connect(self.state_dir)
            return outbox.pending_count(self._reader)

    # -- internals ------------------------------------------------------------------------------

    def _step_channel(
        self,
        conn: sqlite3.Connection,
        channel: Channel,
        wanted: dict[tuple[str, str], Finding],
        now_s: float,
        *,
        run_file: str | None,
        may_clear: Callable[[tuple[str, str]], bool],
        only: tuple[str, str] | None = None,
        measured: Mapping[str, float | bool | None] | None = None,
    ) -> list[Item]:
        instrument = self.config.instrument.name
        states = {
            (a.check, a.subject): a
            for a in outbox.load_alerts(conn, instrument=instrument, channel=channel.name)
        }
        keys = set(wanted) | {k for k in states if may_clear(k)}
        if only is not None:
            keys &= {only}
        items: list[Item] = []
        for key in sorted(keys):
            previous = states.get(key)
            state, action = machine.step(
                previous.state if previous else None,
                wanted.get(key),
                now_s,
                remind_every_s=self.config.alerts.remind_every_s,
            )
            outbox.save_alert(
                conn,
                instrument=instrument,
                check=key[0],
                subject=key[1],
                channel=channel.name,
                state=state,
                run_file=run_file,
            )
            if action is None:
                continue
            shown = state.finding if state is not None else previous.state.finding  # type: ignore[union-attr]
            self._log_action(action, channel.name, shown)
            if action is AlertAction.CLEAR and not self.config.alerts.send_cleared:
                continue
            now_known = measured is not None and shown.metric in measured
            items.append(
                Item(
                    action=action,
                    finding=shown,
                    now=measured.get(shown.metric) if measured is not None else None,
                    now_known=now_known,
                )
            )
        # Silences and maintenance windows: stepped as always, but held back from the channel.
        items = controls.hold_back(conn, self.config, channel, items, now_s, run_file=run_file)
        # Worst first, so the phone's preview line shows what matters.
        items.sort(key=lambda i: (i.action is AlertAction.CLEAR, -i.finding.severity.rank))
        return items

    def _remind(self, conn: sqlite3.Connection, now_s: float, remind_every_s: float) -> None:
        instrument = self.config.instrument.name
        quiet = controls.quiet_now(conn, self.config, now_s)
        for channel in self.config.alerts.channels:
            items: list[Item] = []
            for alert in outbox.load_alerts(conn, instrument=instrument, channel=channel.name):
                if quiet(alert.check, alert.subject):
                    continue  # the silence's end tells it once
                state, action = machine.remind_due(
                    alert.state, now_s, remind_every_s=remind_every_s
                )
                if action is None:
                    continue
                outbox.save_alert(
                    conn,
                    instrument=instrument,
                    check=alert.check,
                    subject=alert.subject,
                    channel=channel.name,
                    state=state,
                    run_file=None,
                )
                self._log_action(action, channel.name, state.finding)
                items.append(Item(action=action, finding=state.finding))
            if items:
                worst = max((i.finding.severity for i in items), key=lambda s: s.rank)
                text = compose(
                    instrument=instrument,
                    run_file=None,
                    at=datetime.fromtimestamp(now_s, UTC),
                    timezone=self.config.instrument.timezone,
                    # the title gives the worst state among this channel's reminders
                    status=f"still open, {worst}",
                    items=items,
                )
                self._enqueue(conn, channel, "reminder", f"remind:{now_s:.3f}", now_s, text, items)

    def _maybe_digest(self, conn: sqlite3.Connection, now_s: float) -> None:
        assert self.config.digest_at is not None  # noqa: S101 - checked by the caller
        local = datetime.fromtimestamp(now_s, self._tz)
        at = self.config.digest_at
        if (local.hour, local.minute) < (at.hour, at.minute):
            return
        day = local.date() - timedelta(days=1)  # the morning digest covers the whole of yesterday
        ref = f"digest:{day.isoformat()}"
        if outbox.has_message(conn, ref) or not self.config.alerts.channels:
            return
        first = jobs.get_state(conn, FIRST_WATCH_KEY)
        if first is not None and day_end_s(day, self.config.instrument.timezone) <= float(first):
            return  # a day that ended before the daemon first watched: nothing to tell
        html, summary = self._render_digest(conn, day)
        title = f"{self.config.instrument.name}: daily digest {day.isoformat()}"
        with db.write(conn):
            for channel in self.config.alerts.channels:
                outbox.enqueue(
                    conn,
                    channel=channel.name,
                    kind="digest",
                    ref=ref,
                    created_at_s=now_s,
                    title=title,
                    body=summary,
                    notify_type="info",
                    attachment=html.encode("utf-8"),
                    attachment_name=f"digest-{day.isoformat()}.html",
                )
        log.info("digest.sent", day=day.isoformat(), channels=len(self.config.alerts.channels))

    def _render_digest(self, conn: sqlite3.Connection, day: date) -> tuple[str, str]:
        from watcher.notify import digest as digest_mod

        built = digest_mod.build_digest(conn, self.config, day)
        return digest_mod.render_html(built), digest_mod.render_text(built)

    def _render_plot(self, conn: sqlite3.Connection, metric: str) -> bytes | None:
        from watcher.notify import digest as digest_mod

        return digest_mod.metric_history_png(conn, self.config, metric, end_s=self._clock())

    def _enqueue(
        self,
        conn: sqlite3.Connection,
        channel: Channel,
        kind: str,
        ref: str,
        now_s: float,
        text: Text,
        items: list[Item],
    ) -> None:
        plot_metric = None
        if self.config.alerts.plots:
            metrics = [
                i.finding.metric
                for i in items
                if i.action is not AlertAction.CLEAR and i.finding.metric.count(".") >= 1
            ]
            plot_metric = metrics[0] if metrics else None
        message_id = outbox.enqueue(
            conn,
            channel=channel.name,
            kind=kind,
            ref=ref,
            created_at_s=now_s,
            title=text.title,
            body=with_quiet_hint(text.body, items, self.config.source),
            notify_type=text.notify_type,
            plot_metric=plot_metric,
        )
        if message_id is not None:
            log.info("message.queued", message_id=message_id, channel=channel.name, kind=kind)

    def _log_action(self, action: AlertAction, channel: str, finding: Finding) -> None:
        fields = {
            "channel": channel,
            "check": finding.check,
            "subject": finding.subject,
            "severity": str(finding.severity),
        }
        if action is AlertAction.CLEAR:
            log.info("alert.cleared", **fields)
        elif action is AlertAction.RAISE:
            log.warning("alert.raised", **fields)
        elif action is AlertAction.ESCALATE:
            log.warning("alert.escalated", **fields)
        else:
            log.info("alert.reminded", **fields)
