"""Message text: a short title and body for a phone, from one run's alert actions.

Pure: takes the run's facts and the list of (action, finding) pairs, returns text. Never a URL.
Each item line names its check, its subject (calibrant, ion or metric), the value and the limit
in the words and precision of ``rules.finding_text`` (the digest's), and what to do.
"""

from __future__ import annotations

import dataclasses
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

from watcher.notify.alert_state import HEARTBEAT_CHECK, UNREADABLE_CHECK
from watcher.records import AlertAction, Finding, Severity, printable
from watcher.rules.finding_text import (
    advice,
    fmt_hours,
    fmt_limit,
    fmt_value,
    metric_label,
    metric_unit,
    subject_of,
)
from watcher.rules.westgard import RULE_MEANING

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
    # For a clear: the clearing run's value of the finding's metric (None: missing), when that
    # run measured it; ``now_known`` False when it did not (reminders, heartbeat, a removed check).
    now: float | bool | None = None
    now_known: bool = False


@dataclass(frozen=True, slots=True, kw_only=True)
class Text:
    title: str
    body: str
    notify_type: str  # info, success, warning, failure


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


# Finding.limit as ``rules.checks.limit_text`` writes it, with an optional persistence tail.
_NUM = r"(-?[0-9.]+(?:e[+-]?[0-9]+)?)"
_PERSIST = re.compile(r" for (\d+) runs$")
_BOUNDS = re.compile(rf"^(baseline difference |z )?(outside|inside) \[{_NUM}, {_NUM}\]$")
_ONE_SIDE = re.compile(rf"^(baseline difference |z )?(above|below) {_NUM}( x baseline)?$")
_EWMA = re.compile(rf"^EWMA outside \[{_NUM}, {_NUM}\]")
_CUSUM = re.compile(rf"^CUSUM above h {_NUM}")
_FORECAST = re.compile(rf"^critical (above|below) {_NUM}$")
_ADVICE_UNREADABLE = "re-export the run from the acquisition software"
# A file that stopped changing while incomplete (intake's "incomplete: ..." verdict): the copy
# died or the share went away, so the fix is on the transfer, not on the instrument.
_ADVICE_STALLED = "check the transfer and the share, then copy the run again"


@dataclass(frozen=True, slots=True, kw_only=True)
class _Parts:
    """A line as ``<lead><checks>, <rest>``: lines equal but for the check are one line."""

    lead: str  # ``NEW critical: ``
    check: str
    rest: str  # ``leu-enk: +6.2 ppm, outside ±5 ppm — recalibrate ...``


def subject_words(metric: str) -> str:
    """What a line is about: the calibrant or ion name, else the metric in words."""
    family = metric.partition(".")[0]
    if family in ("calibrant", "expected_ion") and metric.count(".") >= 2:
        return subject_of(metric)
    return metric_label(metric)


def value_words(metric: str, value: float | bool | None) -> str:
    """The value as the digest and the finding messages show it: ``+6.2 ppm``, ``not found``."""
    if value is None:
        return "missing"
    if isinstance(value, bool) and metric.endswith(".found"):
        return "found" if value else "not found"
    return fmt_value(metric, value)


def _bounds_words(metric: str, lo: float, hi: float) -> str:
    if lo == -hi and metric_unit(metric) == "ppm":
        return f"±{hi:g} ppm"
    return f"{fmt_limit(metric, lo)} to {fmt_limit(metric, hi)}"


def limit_words(finding: Finding) -> str:
    """The limit crossed, in words with the metric's unit: ``outside ±5 ppm``, ``below 30 %``,
    ``below 50 % of the baseline``, ``breaks Westgard 1-3s (one run beyond 3 SD)``."""
    metric, limit = finding.metric, finding.limit
    persist = _PERSIST.search(limit)
    if persist:
        limit = limit[: persist.start()]
    tail = f" for {persist.group(1)} runs in a row" if persist else ""
    if finding.rule.startswith("Westgard") or limit.startswith("Westgard "):
        rules = limit.removeprefix("Westgard ").split(", ")
        meaning = RULE_MEANING.get(rules[0])
        return f"breaks {limit}" + (f" ({meaning})" if meaning else "")
    if m := _BOUNDS.match(limit):
        kind, word, lo, hi = m.group(1), m.group(2), float(m.group(3)), float(m.group(4))
        if kind == "z ":
            sd = f"±{hi:g} SD" if lo == -hi else f"{lo:g} to {hi:g} SD"
            return f"{word} {sd} of the baseline{tail}"
        prefix = "baseline difference " if kind else ""
        return f"{prefix}{word} {_bounds_words(metric, lo, hi)}{tail}"
    if m := _ONE_SIDE.match(limit):
        kind, word, x = m.group(1), m.group(2), float(m.group(3))
        if m.group(4):
            return f"{word} {x * 100:g} % of the baseline{tail}"
        if kind == "z ":
            return f"{word} {x:+g} SD from the baseline{tail}"
        prefix = "baseline difference " if kind else ""
        return f"{prefix}{word} {fmt_limit(metric, x)}{tail}"
    if m := _EWMA.match(limit):
        lo, hi = float(m.group(1)), float(m.group(2))
        return f"drifting: its EWMA left {fmt_limit(metric, lo)} to {fmt_limit(metric, hi)}"
    if m := _CUSUM.match(limit):
        return f"sustained shift: CUSUM over {float(m.group(1)):g} SD"
    if (m := _FORECAST.match(limit)) and finding.forecast_h is not None:
        return (
            f"reaches the critical limit {fmt_limit(metric, float(m.group(2)))} "
            f"in {fmt_hours(finding.forecast_h)} at the current rate"
        )
    if limit.startswith("is "):  # a yes/no check: the value says it all
        return tail.removeprefix(" ")
    return limit + tail


def action_hint(finding: Finding) -> str:
    """What to do, by what went wrong: the metric family's advice, or for an unreadable run
    whether to re-export it (the file itself is bad) or to mend the transfer (it stalled)."""
    if finding.check == UNREADABLE_CHECK:
        return _ADVICE_STALLED if finding.message.startswith("incomplete:") else _ADVICE_UNREADABLE
    return advice(finding.metric)


def _parts(item: Item, run_file: str | None) -> _Parts:
    f = _shown(item.finding)
    word = _ACTION_WORD[item.action]
    if f.check == HEARTBEAT_CHECK:
        if item.action is AlertAction.CLEAR:
            return _Parts(lead=f"{word}: ", check="no runs", rest="runs arrive again")
        return _Parts(lead=f"{word} {f.severity}: ", check="no runs", rest=f.message)
    if f.check == UNREADABLE_CHECK:
        name = run_file or "the run file"
        if item.action is AlertAction.CLEAR:
            return _Parts(lead=f"{word}: ", check="unreadable", rest="runs are readable again")
        text = f.message.removeprefix(f"{run_file}: ") if run_file else f.message
        return _Parts(
            lead=f"{word} {f.severity}: ",
            check="unreadable",
            rest=f"{name}: {text} — {action_hint(f)}",
        )
    subject = printable(subject_words(f.metric))
    if item.action is AlertAction.CLEAR:
        if item.now_known and item.now is not None:
            now = printable(value_words(f.metric, item.now))
            rest = f"{subject}: {now}, within limits again"
        elif item.now_known:
            rest = f"{subject}: not measured in this run, the alert is closed"
        else:
            # not measured by the clearing run (the check was removed or no longer applies)
            rest = f"{subject}: no longer checked (was {value_words(f.metric, f.value)})"
        return _Parts(lead=f"{word}: ", check=f.check, rest=rest)
    limit = printable(limit_words(f))
    rest = f"{subject}: {value_words(f.metric, f.value)}"
    rest += f", {limit}" if limit else ""
    if f.forecast_h is not None and f.rule != "forecast":
        rest += f", critical in {fmt_hours(f.forecast_h)} at the current rate"
    rest += f" — {action_hint(f)}"
    return _Parts(lead=f"{word} {f.severity}: ", check=f.check, rest=rest)


def item_line(item: Item, run_file: str | None = None) -> str:
    """One line per alert change: action and severity, the check, its subject, the value and
    the limit, then what to do: ``NEW critical: calibration drift, leu-enk: +6.2 ppm, outside
    ±5 ppm — recalibrate before the next sample``. An ``OK AGAIN`` line gives the value of the
    run that cleared it. Numbers use ``rules.finding_text`` (the digest's sign and precision)."""
    p = _parts(item, run_file)
    return f"{p.lead}{p.check}, {p.rest}"


def item_lines(items: Sequence[Item], run_file: str | None = None) -> list[str]:
    """The items' lines in order; lines that differ only in the check (two checks firing on
    the same metric with the same value and limit) become one line naming both checks."""
    merged: dict[tuple[str, str], list[str]] = {}
    for item in items:
        p = _parts(item, run_file)
        checks = merged.setdefault((p.lead, p.rest), [])
        if p.check not in checks:
            checks.append(p.check)
    return [f"{lead}{' + '.join(checks)}, {rest}" for (lead, rest), checks in merged.items()]


def title_word(items: Sequence[Item]) -> str:
    """The worst state among a message's items: ``UNREADABLE``, ``CRITICAL``, ``WARNING``,
    ``NOTICE``; ``OK`` for a message of only OK-again lines (whatever the run's own status)."""
    open_items = [i for i in items if i.action is not AlertAction.CLEAR]
    if not open_items:
        return "OK"
    if any(i.finding.check == UNREADABLE_CHECK for i in open_items):
        return "UNREADABLE"
    worst = max((i.finding.severity for i in open_items), key=lambda s: s.rank)
    return str(worst).upper()


def notify_type(items: Sequence[Item]) -> str:
    """apprise's type for the message: the worst open item's, ``success`` for only clears."""
    open_items = [i for i in items if i.action is not AlertAction.CLEAR]
    if not open_items:
        return "success"
    worst = max((i.finding.severity for i in open_items), key=lambda s: s.rank)
    return _NOTIFY_TYPE[worst]


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
    if run_file is None:
        # Not about one run (heartbeat, reminders): a filler word in place of a file name made
        # titles read "NO RUNS alerts"; the state and the time say it all.
        title = f"{instrument}: {status.upper()}"
        head = f"{status} | {local_time(at, timezone)}"
    else:
        # The title gives the worst state among THIS message's items, not the run's status: a
        # channel that takes only some checks (or only the OK-again lines) is not told CRITICAL
        # for a finding it never receives. The head line keeps the run's own status.
        title = f"{instrument}: {title_word(items)} {run_file}"
        head = f"{run_file} | {at_what} {local_time(at, timezone)} | run status {status}"
    body = "\n".join([head, *item_lines(items, run_file)])
    return Text(title=title, body=body, notify_type=notify_type(items))


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
