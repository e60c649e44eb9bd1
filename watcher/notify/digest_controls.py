"""The digest's part about people's controls: events on the record, acknowledgements, quiet times.

``collect`` reads one local day's events (``ionwarden note``), acknowledgements and silences /
maintenance windows from the store; the charts get the events as marks (``plots.event_marks``);
``text_lines`` and ``html_parts`` only format, like the rest of ``watcher.notify.digest``.
"""

from __future__ import annotations

import html
from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

from watcher.notify import quiet
from watcher.store import controls

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Collection

    from watcher.config import Config
    from watcher.notify.plots import Mark

_LABEL_CHARS = 40  # a mark's label on a 7-inch chart; the digest's table has the whole text


@dataclass(frozen=True, slots=True, kw_only=True)
class EventRow:
    at: datetime  # local
    kind: str
    text: str
    by: str
    reset_baselines: bool


@dataclass(frozen=True, slots=True, kw_only=True)
class AckRow:
    time: str  # local HH:MM
    check: str
    subject: str
    severity: str
    by: str
    note: str | None


@dataclass(frozen=True, slots=True, kw_only=True)
class QuietRow:
    source: str  # silence 3 / maintenance sun 06:00-10:00
    start: str  # local "YYYY-MM-DD HH:MM"
    end: str
    scope: str
    reason: str


@dataclass(frozen=True, slots=True, kw_only=True)
class DayControls:
    events: tuple[EventRow, ...] = ()
    acks: tuple[AckRow, ...] = ()
    quiet_times: tuple[QuietRow, ...] = ()
    periods: tuple[quiet.QuietPeriod, ...] = ()

    @property
    def marks(self) -> list[Mark]:
        return [(e.at, label(e)) for e in self.events]

    def silenced(self, check: str, subject: str, at_s: float) -> bool:
        """Whether an alert on (check, subject) at ``at_s`` was held back from the channels."""
        return quiet.is_quiet(self.periods, check, subject, at_s)


def label(event: EventRow) -> str:
    text = event.text if len(event.text) <= _LABEL_CHARS else event.text[: _LABEL_CHARS - 1] + "…"
    return f"{event.kind}: {text}" + (" (reset)" if event.reset_baselines else "")


def collect(
    conn: sqlite3.Connection,
    config: Config,
    start: datetime,
    end: datetime,
    run_files: Collection[str] = (),
) -> DayControls:
    """The controls of the day ``[start, end)`` (aware datetimes). Acknowledgements are those
    made that day and those of alerts the day's runs (``run_files``) raised, whenever made: the
    night's alert acknowledged after midnight belongs to the night's digest."""
    tz = ZoneInfo(config.instrument.timezone)
    instrument = config.instrument.name
    notes = controls.notes_between(conn, instrument=instrument, start=start, end=end)
    start_s, end_s = start.timestamp(), end.timestamp()
    acks = [
        a
        for a in controls.acks(conn, instrument=instrument)
        if start_s <= a.at_s < end_s or (a.run_file is not None and a.run_file in run_files)
    ]
    silences = controls.silences_between(conn, instrument=instrument, start_s=start_s, end_s=end_s)
    periods = [quiet.silence_period(s) for s in silences]
    periods += quiet.maintenance_periods(config, start_s, end_s)

    def local(epoch_s: float) -> str:
        return datetime.fromtimestamp(epoch_s, tz).strftime("%Y-%m-%d %H:%M")

    return DayControls(
        events=tuple(
            EventRow(
                at=n.at.astimezone(tz),
                kind=n.kind,
                text=n.text,
                by=n.by,
                reset_baselines=n.reset_baselines,
            )
            for n in notes
        ),
        acks=tuple(
            AckRow(
                time=datetime.fromtimestamp(a.at_s, tz).strftime("%H:%M"),
                check=a.check,
                subject=a.subject,
                severity=str(a.severity),
                by=a.by,
                note=a.note,
            )
            for a in acks
        ),
        quiet_times=tuple(
            QuietRow(
                source=p.source,
                start=local(p.start_s),
                end=local(p.end_s),
                scope=", ".join(p.checks) or (p.subject or "every alert"),
                reason=p.reason,
            )
            for p in sorted(periods, key=lambda p: p.start_s)
        ),
        periods=tuple(periods),
    )


def text_lines(d: DayControls) -> list[str]:
    lines: list[str] = []
    for e in d.events:
        reset = ", baselines restarted" if e.reset_baselines else ""
        lines.append(f"event: {e.at:%H:%M} {e.kind}: {e.text} ({e.by}{reset})")
    for a in d.acks:
        note = f": {a.note}" if a.note else ""
        lines.append(
            f"acknowledged: {a.time} {a.check}, {a.subject} ({a.severity}) by {a.by}{note}"
        )
    for q in d.quiet_times:
        lines.append(f"quiet: {q.source}, {q.start} to {q.end}, {q.scope}: {q.reason}")
    return lines


def html_parts(d: DayControls) -> list[str]:
    e = html.escape
    parts: list[str] = []
    if d.events:
        parts.append(
            f"<h2>Events on the record ({len(d.events)})</h2>"
            '<div class="scroll"><table id="events"><tr><th>time</th><th>kind</th>'
            "<th>what happened</th><th>by</th><th>baselines</th></tr>"
        )
        parts.extend(
            f'<tr class="event"><td data-label="time">{ev.at:%H:%M}</td>'
            f'<td data-label="kind">{e(ev.kind)}</td><td data-label="what">{e(ev.text)}</td>'
            f'<td data-label="by">{e(ev.by)}</td>'
            f'<td data-label="baselines">{"restarted" if ev.reset_baselines else "kept"}</td></tr>'
            for ev in d.events
        )
        parts.append("</table></div>")
    if d.acks:
        parts.append(f'<h2>Acknowledged ({len(d.acks)})</h2><ul id="acks">')
        parts.extend(
            f'<li class="ack">{e(a.time)} {e(a.check)}, {e(a.subject)} ({e(a.severity)}) '
            f"by {e(a.by)}" + (f": {e(a.note)}" if a.note else "") + "</li>"
            for a in d.acks
        )
        parts.append("</ul>")
    if d.quiet_times:
        parts.append(f'<h2>Quiet times ({len(d.quiet_times)})</h2><ul id="quiet">')
        parts.extend(
            f'<li class="quiet">{e(q.source)}: {e(q.start)} to {e(q.end)}, {e(q.scope)}: '
            f"{e(q.reason)}</li>"
            for q in d.quiet_times
        )
        parts.append("</ul>")
    return parts
