"""Message text: a short title and body for a phone, from one run's alert actions.

Pure: takes the run's facts and the list of (action, finding) pairs, returns text. Never a URL.
"""

from __future__ import annotations

import dataclasses
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

from watcher.records import AlertAction, Finding, Severity, printable

if TYPE_CHECKING:
    from collections.abc import Sequence
    from datetime import datetime

# apprise notify types (plain strings so that only deliver.py imports apprise).
_NOTIFY_TYPE = {Severity.NOTICE: "info", Severity.WARNING: "warning", Severity.CRITICAL: "failure"}
_ACTION_WORD = {
    AlertAction.RAISE: "NEW",
    AlertAction.ESCALATE: "WORSE",
    AlertAction.REMIND: "STILL",
    AlertAction.CLEAR: "OK AGAIN",
}


@dataclass(frozen=True, slots=True, kw_only=True)
class Item:
    """One alert change in a message: what happened to which finding."""

    action: AlertAction
    finding: Finding  # the current finding; for a clear, the last one that was open


@dataclass(frozen=True, slots=True, kw_only=True)
class Text:
    title: str
    body: str
    notify_type: str  # info, success, warning, failure


def format_value(value: float | bool | None) -> str:
    """A measured value in at most 4 significant digits; ``missing`` for None."""
    if value is None:
        return "missing"
    if isinstance(value, bool):
        return "yes" if value else "no"
    return f"{value:.4g}"


def local_time(at: datetime, timezone: str) -> str:
    """``2024-04-12 03:14 CEST`` in the instrument's time zone."""
    return at.astimezone(ZoneInfo(timezone)).strftime("%Y-%m-%d %H:%M %Z")


def _shown(finding: Finding) -> Finding:
    """The finding with its texts printable: they carry file names and run contents, which a
    chat client or a phone would otherwise show as line breaks and terminal codes."""
    return dataclasses.replace(
        finding,
        check=printable(finding.check),
        subject=printable(finding.subject),
        message=printable(finding.message),
    )


def item_line(item: Item, run_file: str | None = None) -> str:
    """One line per alert change: action and severity, then the finding's own sentence.

    The rules engine writes each finding's message for a person (what, how far off, what it means);
    the run's name is already in the message head, so a leading ``<file>: `` is dropped. The rule
    is named when it is not a plain limit (a Westgard rule, a trend, a forecast).
    """
    f = _shown(item.finding)
    if item.action is AlertAction.CLEAR:
        what = f.check if f.subject in (f.check, "file") else f"{f.check} ({f.subject})"
        return f"{_ACTION_WORD[item.action]}: {what}"
    text = f.message
    for prefix in {f"{run_file}: " if run_file else "", f"{f.check}: "} - {""}:
        text = text.removeprefix(prefix)
    line = f"{_ACTION_WORD[item.action]} {f.severity}: {text}"
    if f.rule not in ("limit", "baseline", "read") and f.rule not in text:
        line += f" [rule {f.rule}]"
    if f.forecast_h is not None and "forecast" not in f.rule:
        line += f", forecast: critical in {f.forecast_h:.1f} h"
    return line


def compose(
    *,
    instrument: str,
    run_file: str | None,
    at: datetime,
    timezone: str,
    status: str,
    items: Sequence[Item],
    at_what: str = "judged",
) -> Text:
    """The message for one run (or one reminder round) on one channel.

    Args:
        instrument: instrument name from the config.
        run_file: the run's file name; None for messages not about one run (heartbeat, reminders).
        at: when the run was judged (aware datetime).
        timezone: IANA name the time is shown in.
        status: the run's status word (``critical``), or a short state for non-run messages.
        items: the alert changes, in the order they are listed.
        at_what: what ``at`` is the time of (``judged``, or ``acquired`` when the file says).
    """
    # The layout's own line breaks separate the parts; each part is one printable line.
    instrument = printable(instrument)
    status = printable(status)
    run_file = printable(run_file) if run_file is not None else None
    open_items = [i for i in items if i.action is not AlertAction.CLEAR]
    if open_items:
        worst = max((i.finding.severity for i in open_items), key=lambda s: s.rank)
        notify_type = _NOTIFY_TYPE[worst]
    else:
        notify_type = "success"
    if run_file is None:
        # Not about one run (heartbeat, reminders): a filler word in place of a file name made
        # titles read "NO RUNS alerts"; the state and the time say it all.
        title = f"{instrument}: {status.upper()}"
        head = f"{status} | {local_time(at, timezone)}"
    else:
        title = f"{instrument}: {status.upper()} {run_file}"
        head = f"{run_file} | {at_what} {local_time(at, timezone)} | status {status}"
    body = "\n".join([head, *(item_line(i, run_file) for i in items)])
    return Text(title=title, body=body, notify_type=notify_type)


def short_name(instrument: str) -> str:
    """The instrument's name as a token: ``Kestrel-2 Q-TOF`` -> ``kestrel-2-q-tof``."""
    token = re.sub(r"[^a-z0-9]+", "-", instrument.lower()).strip("-")
    return token or "instrument"


def with_message_id(body: str, instrument: str, message_id: int) -> str:
    """The body with a last line ``id: <instrument>-<message id>``, the same on every attempt.

    A receiver slower than the read timeout still takes the message, and the retry sends it
    again; the stable id lets a receiver (or a person) see that two copies are one message.
    """
    return f"{body}\nid: {short_name(instrument)}-{message_id}"
