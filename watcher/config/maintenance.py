"""The ``maintenance:`` section: recurring (``every: "sun 06:00-10:00"``) and one-off windows.

``parse_every`` and ``parse_local`` are pure text -> value functions (they raise ValueError with
the sentence a person reads); ``build_maintenance`` turns the YAML list into
``PlannedWindow`` records, every problem named with its file, line and key.
"""

from __future__ import annotations

import re
from datetime import datetime, time
from typing import TYPE_CHECKING, Any

from watcher.config.keys import KEYS
from watcher.config.model import NOTE_KINDS, WEEKDAYS, PlannedWindow, Weekly

if TYPE_CHECKING:
    from watcher.config.values import Values
    from watcher.config.yamllines import KeyPath

_EVERY_RE = re.compile(
    r"^\s*(?P<days>[a-z,\-]+)\s+(?P<start>\d{1,2}:\d{2})\s*-\s*(?P<end>\d{1,2}:\d{2})\s*$"
)
_LOCAL_FORMS = ("%Y-%m-%d %H:%M", "%Y-%m-%dT%H:%M", "%Y-%m-%d %H:%M:%S", "%Y-%m-%dT%H:%M:%S")
EVERY_FORM = '"DAYS HH:MM-HH:MM" with DAYS mon..sun, a list (sat,sun), a range (mon-fri) or daily'


def _clock(text: str) -> time:
    hours, minutes = (int(part) for part in text.split(":"))
    if not (0 <= hours <= 23 and 0 <= minutes <= 59):
        raise ValueError(f"{text!r} is not a time of day (00:00-23:59)")
    return time(hours, minutes)


def _day(name: str) -> int:
    if name not in WEEKDAYS:
        raise ValueError(f"unknown day {name!r}; days are {', '.join(WEEKDAYS)}")
    return WEEKDAYS.index(name)


def parse_every(text: str) -> Weekly:
    """``"sun 06:00-10:00"``, ``"mon-fri 22:00-02:00"``, ``"sat,sun 06:00-10:00"``, ``"daily ..."``.

    Raises:
        ValueError: the text does not have that form, names an unknown day, or start == end.
    """
    match = _EVERY_RE.match(text.lower())
    if match is None:
        raise ValueError(f"expected {EVERY_FORM}, got {text!r}")
    days: list[int] = []
    for part in match["days"].split(","):
        if part == "daily":
            days.extend(range(7))
        elif "-" in part:
            first, _, last = part.partition("-")
            a, b = _day(first), _day(last)
            days.extend(range(a, b + 1) if a <= b else [*range(a, 7), *range(0, b + 1)])
        else:
            days.append(_day(part))
    start, end = _clock(match["start"]), _clock(match["end"])
    if start == end:
        raise ValueError(f"a window needs two different times, got {text!r}")
    return Weekly(days=tuple(sorted(set(days))), start=start, end=end)


def parse_local(text: str) -> datetime:
    """A local wall-clock date and time, ``"2026-12-24 18:00"`` (naive: the instrument's zone).

    Raises:
        ValueError: not of the form YYYY-MM-DD HH:MM.
    """
    for form in _LOCAL_FORMS:
        try:
            return datetime.strptime(text.strip(), form)  # noqa: DTZ007 - local by design
        except ValueError:
            continue
    raise ValueError(f'expected a local date and time "YYYY-MM-DD HH:MM", got {text!r}')


def build_maintenance(v: Values, data: Any, check_names: set[str]) -> tuple[PlannedWindow, ...]:
    """The ``maintenance:`` list; each item has ``every`` or both ``from`` and ``until``."""
    out: list[PlannedWindow] = []
    for i, item in enumerate(v.sequence(("maintenance",), data)):
        path: KeyPath = ("maintenance", i)
        m = v.mapping(path, item, KEYS["maintenance"], "maintenance keys")
        if m is None:
            continue
        kw: dict[str, Any] = {"line": v.line(path)}
        v.put(kw, m, path, "every", lambda p, x: _converted(v, p, x, parse_every))
        v.put(kw, m, path, "from", lambda p, x: _converted(v, p, x, parse_local), field="from_at")
        v.put(kw, m, path, "until", lambda p, x: _converted(v, p, x, parse_local), field="until_at")
        v.put(kw, m, path, "reason", lambda p, x: v.text(p, x))
        v.put(kw, m, path, "checks", lambda p, x: v.names_of(p, x, check_names, "check"))
        if "every" in m and ("from" in m or "until" in m):
            v.problem(path, "give either every or from + until, not both")
            continue
        if "every" not in m and not ("from" in m and "until" in m):
            v.problem(path, 'a window needs every: "sun 06:00-10:00", or both from and until')
            continue
        start, end = kw.get("from_at"), kw.get("until_at")
        if start is not None and end is not None and end <= start:
            v.problem((*path, "until"), f"until ({end:%Y-%m-%d %H:%M}) is not after from")
            continue
        if ("every" in m and "every" not in kw) or ("from" in m and "from_at" not in kw):
            continue  # the bad value is reported already
        if "until" in m and "until_at" not in kw:
            continue
        out.append(PlannedWindow(**kw))
    return tuple(out)


def _converted(v: Values, path: KeyPath, x: Any, parse: Any) -> Any:
    text = v.text(path, x)
    try:
        return parse(text)
    except ValueError as exc:
        raise v.fail(path, str(exc)) from exc


def build_reset_kinds(v: Values, path: KeyPath, x: Any) -> tuple[str, ...]:
    """``reset_baselines_on: [column, source]``: kinds of note that restart the baselines."""
    kinds = v.texts(path, x)
    for i, kind in enumerate(kinds):
        v.choice((*path, i) if isinstance(x, list) else path, kind, NOTE_KINDS)
    return kinds
