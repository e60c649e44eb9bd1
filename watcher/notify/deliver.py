"""Delivery through apprise: the worker thread that empties the outbox. The only apprise importer.

apprise 2.x fails by value: ``add()`` returns False for a URL it cannot use and ``notify()``
returns a falsy result (FAILURE, PARTIAL, TIMEOUT, NOMATCH) instead of raising; both are checked.
Every URL gets explicit ``cto``/``rto`` (docs/reliability.md item 4: a hanging receiver held a
call 4 s by default, a silent SMTP server 15 s). URLs leave this module only masked
(``url(privacy=True)``), and apprise's own logger is held at INFO or above because its DEBUG and
TRACE output carry message bodies and passwords.
"""

from __future__ import annotations

import logging
import tempfile
import threading
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import urlsplit

import structlog

with warnings.catch_warnings():
    # apprise 2.3's e-mail plugin imports the stdlib ``imghdr``, deprecated since Python 3.11;
    # load every plugin now, under this filter, rather than lazily at the first add().
    warnings.simplefilter("ignore", DeprecationWarning)
    import apprise
    from apprise.manager_plugins import NotificationManager

    NotificationManager().load_modules()  # type: ignore[no-untyped-call]

from watcher.errors import DeliveryError
from watcher.notify.alert_text import with_message_id
from watcher.store import db, outbox

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Callable

    from watcher.config import Alerts, Channel

log = structlog.get_logger("watcher.notify.deliver")


def quiet_apprise_logger() -> None:
    """Keep the ``apprise`` logger at INFO or above: below it, it logs secrets."""
    logger = logging.getLogger("apprise")
    if logger.getEffectiveLevel() < logging.INFO:
        logger.setLevel(logging.INFO)


def with_timeouts(url: str, alerts: Alerts) -> str:
    """The URL with ``cto``/``rto`` query arguments added unless the lab set them itself."""
    query = urlsplit(url).query
    present = {part.split("=", 1)[0] for part in query.split("&") if part}
    extra = []
    if "cto" not in present:
        extra.append(f"cto={alerts.connect_timeout_s:g}")
    if "rto" not in present:
        extra.append(f"rto={alerts.read_timeout_s:g}")
    if not extra:
        return url
    return url + ("&" if "?" in url else "?") + "&".join(extra)


@dataclass(slots=True)
class Target:
    """One channel made ready for apprise."""

    name: str
    apobj: Any  # apprise.Apprise (untyped library)
    masked_url: str
    takes_attachments: bool


def make_target(channel: Channel, alerts: Alerts) -> Target:
    """Hand a channel's URL to apprise; refuse it by channel name, never echoing the URL.

    Raises:
        DeliveryError: the URL is empty or apprise cannot use it.
    """
    quiet_apprise_logger()
    if not channel.url.strip():
        raise DeliveryError(
            f"alert channel '{channel.name}': its URL is empty (is the ${{...}} variable set?)"
        )
    apobj = apprise.Apprise()
    if not apobj.add(with_timeouts(channel.url, alerts)):
        scheme = channel.url.split("://", 1)[0] if "://" in channel.url else "(no scheme)"
        raise DeliveryError(
            f"alert channel '{channel.name}': apprise cannot use its URL (scheme '{scheme}'); "
            "check the URL's form against the apprise documentation"
        )
    servers: list[Any] = list(apobj)
    masked = ", ".join(str(s.url(privacy=True)) for s in servers)
    attachments = all(bool(getattr(s, "attachment_support", False)) for s in servers)
    return Target(name=channel.name, apobj=apobj, masked_url=masked, takes_attachments=attachments)


def masked_url(channel: Channel, alerts: Alerts) -> str:
    """The channel's URL as apprise masks it, or a placeholder when apprise refuses it."""
    try:
        return make_target(channel, alerts).masked_url
    except DeliveryError:
        return "(unusable URL)"


def send(
    target: Target,
    message: outbox.Message,
    *,
    timeout_s: float,
    instrument: str = "",
) -> tuple[bool, str]:
    """One notify() call; returns (delivered, outcome word such as SUCCESS or FAILURE).

    The body ends in the message's stable id (``alert_text.with_message_id``): every attempt of
    one message carries the same id, so copies a slow receiver took twice can be told apart."""
    with tempfile.TemporaryDirectory(prefix="ionwarden-attach-") as tmp:
        attach = None
        if message.attachment is not None and target.takes_attachments:
            path = Path(tmp) / (message.attachment_name or "attachment.bin")
            path.write_bytes(message.attachment)
            attach = str(path)
        return send_text(
            target,
            title=message.title,
            body=with_message_id(message.body, instrument, message.message_id),
            notify_type=message.notify_type,
            timeout_s=timeout_s,
            attach=attach,
        )


def send_text(
    target: Target,
    *,
    title: str,
    body: str,
    notify_type: str,
    timeout_s: float,
    attach: str | None = None,
) -> tuple[bool, str]:
    """One notify() call of a message that is not in the outbox (the store cannot be written:
    ``Notifier.send_direct``); returns (delivered, outcome word)."""
    try:
        result = target.apobj.notify(
            body=body, title=title, notify_type=notify_type, attach=attach, timeout=timeout_s
        )
    except Exception as exc:  # a plugin that raises (a socket timeout, say) is a failure:
        # counted and backed off like any other, not retried at every poll of the worker
        return False, type(exc).__name__
    status = getattr(result, "status", None)
    word = getattr(status, "name", None) or ("SUCCESS" if result else "FAILURE")
    return bool(result), str(word)


def retry_wait_s(attempts: int, *, base_s: float, max_s: float) -> float:
    """Wait after the n-th failed attempt: base, 2 x base, 4 x base, ... capped at ``max_s``."""
    return float(min(max_s, base_s * 2 ** max(0, attempts - 1)))


class DeliveryWorker:
    """Sends stored messages in order per channel, oldest first, on a thread of its own.

    A failed message blocks the later ones of its channel (so they arrive in order) and is retried
    with exponential backoff until it is older than ``alerts.retry_for_s``, then abandoned.

    Args:
        targets: one per channel, from ``make_target``.
        alerts: timeouts and retry age.
        state_dir: the worker opens its own connection there.
        clock: epoch seconds.
        on_event: called as ``on_event(kind, **fields)`` for the health log.
        render_plot: renders a message's ``plot_metric`` into PNG bytes, or None.
    """

    def __init__(
        self,
        targets: list[Target],
        alerts: Alerts,
        state_dir: Path,
        *,
        clock: Callable[[], float] = time.time,
        on_event: Callable[..., None] | None = None,
        render_plot: Callable[[sqlite3.Connection, str], bytes | None] | None = None,
        backoff_base_s: float | None = None,
        backoff_max_s: float | None = None,
        poll_s: float = 1.0,
        instrument: str = "",
    ) -> None:
        self._targets = {t.name: t for t in targets}
        self._instrument = instrument  # names the messages' ids
        self._alerts = alerts
        self._state_dir = state_dir
        self._clock = clock
        self._on_event = on_event
        self._render_plot = render_plot
        # The lab's retry waits (alerts.retry_first_wait / retry_max_wait) unless a test sets them.
        self._backoff_base_s = (
            alerts.retry_first_wait_s if backoff_base_s is None else backoff_base_s
        )
        self._backoff_max_s = alerts.retry_max_wait_s if backoff_max_s is None else backoff_max_s
        self._poll_s = poll_s
        self._stop = threading.Event()
        self._wake = threading.Event()
        self._thread: threading.Thread | None = None

    def start(self) -> None:
        if self._thread is not None:
            return
        self._stop.clear()
        self._thread = threading.Thread(target=self._loop, name="ionwarden-delivery", daemon=True)
        self._thread.start()

    def wake(self) -> None:
        """Look at the outbox now (a new message was committed)."""
        self._wake.set()

    def stop(self, timeout_s: float = 5.0) -> bool:
        """Ask the worker to finish; False if it was still inside a send when the time ran out."""
        if self._thread is None:
            return True
        self._stop.set()
        self._wake.set()
        self._thread.join(timeout_s)
        alive = self._thread.is_alive()
        self._thread = None
        return not alive

    def _loop(self) -> None:
        conn = db.connect(self._state_dir, daemon=True)
        try:
            while not self._stop.is_set():
                try:
                    busy = self.run_once(conn, self._clock())
                except Exception as exc:  # the worker must outlive a locked database or a bug
                    log.error("message.failed", error=f"delivery worker: {exc!r}")
                    busy = False
                if not busy:
                    self._wake.wait(self._poll_s)
                    self._wake.clear()
        finally:
            conn.close()

    def run_once(self, conn: sqlite3.Connection, now_s: float) -> bool:
        """One pass over the channels: at most one attempt each. True if anything changed."""
        changed = False
        for name, target in self._targets.items():
            if self._stop.is_set():
                break
            message = outbox.next_pending(conn, name)
            if message is None or message.next_attempt_at_s > now_s:
                continue
            changed = True
            if now_s - message.created_at_s > self._alerts.retry_for_s:
                with db.write(conn):
                    outbox.mark_abandoned(conn, message.message_id, now_s)
                fields = {
                    "message_id": message.message_id,
                    "channel": name,
                    "attempts": message.attempts,
                    "last_error": message.last_error,
                }
                log.error("message.abandoned", **fields)
                self._event("message.abandoned", **fields)
                continue
            message = self._with_plot(conn, message)
            ok, word = send(
                target, message, timeout_s=self._alerts.timeout_s, instrument=self._instrument
            )
            done_s = self._clock()
            if ok:
                # Marked right after SUCCESS: the window for a duplicate is this one commit.
                with db.write(conn):
                    outbox.mark_delivered(conn, message.message_id, done_s)
                fields = {
                    "message_id": message.message_id,
                    "channel": name,
                    "message_kind": message.kind,
                }
                log.info("message.delivered", **fields)
                self._event("message.delivered", **fields)
            else:
                attempts = message.attempts + 1
                wait_s = retry_wait_s(
                    attempts, base_s=self._backoff_base_s, max_s=self._backoff_max_s
                )
                error = f"{word} sending to {target.masked_url}"
                with db.write(conn):
                    outbox.mark_failed(
                        conn, message.message_id, error=error, next_attempt_at_s=done_s + wait_s
                    )
                fields = {
                    "message_id": message.message_id,
                    "channel": name,
                    "attempts": attempts,
                    "error": error,
                    "retry_in_s": wait_s,
                }
                log.warning("message.failed", **fields)
                self._event("message.failed", **fields)
        return changed

    def _with_plot(self, conn: sqlite3.Connection, message: outbox.Message) -> outbox.Message:
        if message.plot_metric is None or self._render_plot is None:
            return message
        try:
            png = self._render_plot(conn, message.plot_metric)
        except Exception as exc:  # a plot is a nicety: never let it stop the alert
            log.warning("message.failed", error=f"plot of {message.plot_metric}: {exc}")
            png = None
        if png is None:
            return message
        name = message.plot_metric.replace("/", "_") + ".png"
        with db.write(conn):
            outbox.set_attachment(conn, message.message_id, png, name)
        refreshed = outbox.next_pending(conn, message.channel)
        return refreshed if refreshed is not None else message

    def _event(self, kind: str, **fields: object) -> None:
        if self._on_event is not None:
            self._on_event(kind, **fields)
