"""Message text for people's controls: the how-to-quiet line and the end-of-silence summary.

Pure, like ``alert_text``, and kept apart from it: the alert lines' wording lives there, what a
silence or an acknowledgement adds lives here. Never a URL.
"""

from __future__ import annotations

import shlex
from dataclasses import dataclass
from typing import TYPE_CHECKING

from watcher.notify.alert_text import Item, Text, item_line, local_time
from watcher.records import AlertAction, printable

if TYPE_CHECKING:
    from collections.abc import Sequence
    from datetime import datetime
    from pathlib import Path


def quiet_hint(config_path: Path | None) -> str:
    """One short line: the commands that stop the reminders or pause the alerts."""
    config = shlex.quote(printable(str(config_path))) if config_path is not None else "CONFIG"
    return (
        f"seen it? ionwarden ack -c {config} | pause: ionwarden silence add -c {config} "
        '--for 2h --reason "..."'
    )


def with_quiet_hint(body: str, items: Sequence[Item], config_path: Path | None) -> str:
    """The body with the hint as its last line when something is open (not for clears only)."""
    if not any(i.action is not AlertAction.CLEAR for i in items):
        return body
    return f"{body}\n{quiet_hint(config_path)}"


@dataclass(frozen=True, slots=True, kw_only=True)
class ClearedKey:
    """An alert that cleared while quiet: what it was, and whether it also opened then."""

    what: str  # ``check`` or ``check (subject)``
    worst: str  # the worst severity it had
    opened_during: bool


def silence_summary(
    *,
    instrument: str,
    source: str,
    reason: str,
    at: datetime,
    timezone: str,
    still_open: Sequence[Item],
    cleared: Sequence[ClearedKey],
    changes_while_quiet: int,
) -> Text:
    """The one message at the end of a silence or maintenance window.

    Each alert still open is told once (its current finding); alerts that opened and cleared
    meanwhile are listed by name, not replayed; so are those that were open before and cleared.
    """
    head = f"{printable(source)} over ({printable(reason)}) | {local_time(at, timezone)}"
    lines = [head]
    if still_open:
        lines.append(f"still open ({len(still_open)}):")
        lines.extend(item_line(i) for i in still_open)
    during = [c for c in cleared if c.opened_during]
    before = [c for c in cleared if not c.opened_during]
    if during:
        lines.append(
            "opened and cleared meanwhile: "
            + "; ".join(f"{printable(c.what)} ({c.worst})" for c in during)
        )
    if before:
        lines.append("cleared meanwhile: " + "; ".join(printable(c.what) for c in before))
    lines.append(f"{changes_while_quiet} alert change(s) were held back while quiet")
    if still_open:
        worst = max(i.finding.severity.rank for i in still_open)
        notify_type = {1: "info", 2: "warning", 3: "failure"}.get(worst, "warning")
        state = "still open"
    else:
        notify_type, state = "success", "all clear"
    title = f"{printable(instrument)}: QUIET TIME OVER, {state.upper()}"
    return Text(title=title, body="\n".join(lines), notify_type=notify_type)


def cleared_what(check: str, subject: str) -> str:
    """``check, subject`` in words (the calibrant or ion name, never a metric path)."""
    if subject in (check, "file", "runs"):
        return check
    from watcher.notify.alert_text import subject_words

    return f"{check}, {subject_words(subject)}"
