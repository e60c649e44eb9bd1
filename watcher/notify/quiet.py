"""Quiet times: when an alert reaches no channel (silences, maintenance windows), pure.

A ``QuietPeriod`` is a span of epoch seconds and a scope (checks, subject). Silences are stored
as epoch seconds already (``--for 4h`` is four real hours, whatever the clocks do meanwhile);
maintenance windows are local wall-clock times in the instrument's zone, turned into epoch
spans here with ``zoneinfo``: a window across a DST change keeps its wall-clock start and end,
so it is an hour shorter or longer in real time (what a lab's rota means by "Sunday 06:00").
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import datetime, time, timedelta
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

if TYPE_CHECKING:
    from collections.abc import Iterable, Sequence

    from watcher.config import Config
    from watcher.config.model import PlannedWindow
    from watcher.store.controls import Silence

_DURATION_PART = re.compile(r"(\d+(?:\.\d*)?)\s*(d|h|min|m|s)")
_DURATION_RE = re.compile(r"^\s*(?:(\d+(?:\.\d*)?)\s*(d|h|min|m|s)\s*)+$")
_UNIT_S = {"d": 86400.0, "h": 3600.0, "min": 60.0, "m": 60.0, "s": 1.0}
_CLOCK_RE = re.compile(r"^\s*([01]?\d|2[0-3]):([0-5]\d)\s*$")
MAX_SILENCE_S = 30 * 86400.0  # a longer silence is an alarm switched off, not a pause


@dataclass(frozen=True, slots=True, kw_only=True)
class QuietPeriod:
    """Alerts in scope reach no channel from ``start_s`` (inclusive) to ``end_s`` (exclusive).

    Attributes:
        checks: the checks it covers; empty: every check.
        subject: the one subject (metric path or ``file``/``runs``) it covers; None: all.
        reason: why, as people wrote it.
        source: ``silence 3`` or ``maintenance sun 06:00-10:00``, for messages and logs.
    """

    start_s: float
    end_s: float
    checks: tuple[str, ...] = ()
    subject: str | None = None
    reason: str = ""
    source: str = ""

    def covers(self, check: str, subject: str, at_s: float) -> bool:
        if not (self.start_s <= at_s < self.end_s):
            return False
        if self.checks and check not in self.checks:
            return False
        return self.subject is None or subject_matches(self.subject, subject)

    def covers_all(self) -> bool:
        return not self.checks and self.subject is None


def subject_matches(wanted: str, subject: str) -> bool:
    """``--subject``: an alert's own subject (a metric path such as
    ``calibrant.leu-enk.median_ppm``, or ``file``/``runs``) or what it is about (``leu-enk``)."""
    from watcher.rules.finding_text import subject_of

    return wanted in (subject, subject_of(subject))


def is_quiet(periods: Iterable[QuietPeriod], check: str, subject: str, at_s: float) -> bool:
    return any(p.covers(check, subject, at_s) for p in periods)


def local_epoch(naive: datetime, tz: ZoneInfo) -> float:
    """Epoch seconds of a local wall-clock time, as PEP 495 reads it with ``fold=0``: a time the
    clocks show twice (the autumn hour) is its first occurrence; a time they skip (the spring
    hour) is read with the offset before the jump, so 02:30 on that day is 03:30 new time."""
    return naive.replace(tzinfo=tz, fold=0).timestamp()


def occurrences(
    window: PlannedWindow, timezone: str, from_s: float, to_s: float
) -> list[tuple[float, float]]:
    """The window's spans (epoch seconds) that overlap ``[from_s, to_s)``, oldest first."""
    tz = ZoneInfo(timezone)
    if window.every is None:
        if window.from_at is None or window.until_at is None:
            return []
        span = (local_epoch(window.from_at, tz), local_epoch(window.until_at, tz))
        return [span] if span[0] < to_s and span[1] > from_s else []
    weekly = window.every
    out: list[tuple[float, float]] = []
    # a window started up to a day before from_s may still be open (it ends the next day)
    day = datetime.fromtimestamp(from_s, tz).date() - timedelta(days=1)
    last = datetime.fromtimestamp(to_s, tz).date()
    while day <= last:
        if day.weekday() in weekly.days:
            end_day = day + timedelta(days=1) if weekly.end <= weekly.start else day
            start_s = local_epoch(datetime.combine(day, weekly.start), tz)
            end_s = local_epoch(datetime.combine(end_day, weekly.end), tz)
            if start_s < to_s and end_s > from_s:
                out.append((start_s, end_s))
        day += timedelta(days=1)
    return out


def describe(window: PlannedWindow) -> str:
    """``maintenance sun 06:00-10:00`` / ``maintenance 2026-12-24 18:00 to 2026-12-27 08:00``."""
    from watcher.config.model import WEEKDAYS

    if window.every is not None:
        days = ",".join(WEEKDAYS[d] for d in window.every.days)
        return f"maintenance {days} {window.every.start:%H:%M}-{window.every.end:%H:%M}"
    start = window.from_at.strftime("%Y-%m-%d %H:%M") if window.from_at else "?"
    end = window.until_at.strftime("%Y-%m-%d %H:%M") if window.until_at else "?"
    return f"maintenance {start} to {end}"


def maintenance_periods(config: Config, from_s: float, to_s: float) -> list[QuietPeriod]:
    """Every maintenance window's spans overlapping ``[from_s, to_s)``, as quiet periods."""
    out: list[QuietPeriod] = []
    for window in config.maintenance:
        for start_s, end_s in occurrences(window, config.instrument.timezone, from_s, to_s):
            out.append(
                QuietPeriod(
                    start_s=start_s,
                    end_s=end_s,
                    checks=window.checks,
                    reason=window.reason,
                    source=describe(window),
                )
            )
    return sorted(out, key=lambda p: (p.start_s, p.end_s))


def quiet_queue_expected(config: Config, now_s: float, every_s: float) -> bool:
    """Whether the no-run alert should hold: a maintenance window covering every check is open
    now, or ended less than ``every_s`` ago (the wait for the next run starts at its end)."""
    return any(
        p.covers_all() and p.start_s <= now_s and now_s - p.end_s < every_s
        for p in maintenance_periods(config, now_s - every_s, now_s + 1)
    )


def silence_period(silence: Silence) -> QuietPeriod:
    return QuietPeriod(
        start_s=silence.start_s,
        end_s=silence.end_s,
        checks=() if silence.check is None else (silence.check,),
        subject=silence.subject,
        reason=silence.reason,
        source=f"silence {silence.silence_id}",
    )


def active_periods(config: Config, silences: Sequence[Silence], now_s: float) -> list[QuietPeriod]:
    """Silences and maintenance windows in force at ``now_s``."""
    periods = [silence_period(s) for s in silences if s.start_s <= now_s < s.end_s]
    periods += [p for p in maintenance_periods(config, now_s, now_s + 1) if p.start_s <= now_s]
    return periods


def parse_for(text: str) -> float:
    """``--for 4h``, ``30min``, ``1h30min``, ``90s`` or ``2d`` as seconds (> 0, at most 30 days).

    Raises:
        ValueError: another form, zero, or longer than ``MAX_SILENCE_S``.
    """
    if not _DURATION_RE.match(text):
        raise ValueError(f"--for: expected a duration such as 30min, 4h or 1h30min, got {text!r}")
    seconds = sum(float(n) * _UNIT_S[u] for n, u in _DURATION_PART.findall(text))
    if seconds <= 0 or seconds > MAX_SILENCE_S:
        raise ValueError(f"--for: expected more than 0 and at most 30 days, got {text!r}")
    return seconds


def parse_until(text: str, now_s: float, timezone: str) -> float:
    """``--until 08:00`` (the next 08:00 local after now) or ``--until "2026-12-24 08:00"``.

    Raises:
        ValueError: another form, or a time not after now.
    """
    from watcher.config.maintenance import parse_local

    tz = ZoneInfo(timezone)
    match = _CLOCK_RE.match(text)
    if match:
        now_local = datetime.fromtimestamp(now_s, tz)
        wanted = time(int(match[1]), int(match[2]))
        day = now_local.date()
        end_s = local_epoch(datetime.combine(day, wanted), tz)
        if end_s <= now_s:
            end_s = local_epoch(datetime.combine(day + timedelta(days=1), wanted), tz)
        return end_s
    try:
        end_s = local_epoch(parse_local(text), tz)
    except ValueError as exc:
        raise ValueError(f'--until: expected HH:MM or "YYYY-MM-DD HH:MM", got {text!r}') from exc
    if end_s <= now_s:
        raise ValueError(f"--until: {text} ({timezone}) is not in the future")
    if end_s - now_s > MAX_SILENCE_S:
        raise ValueError(f"--until: {text} is more than 30 days away")
    return end_s
