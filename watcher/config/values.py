"""Typed readers of single YAML config values; each bad value is recorded with file, line and key.

``Values`` is the bookkeeping that lets the section builders go on after a bad value: a reader
records a ``ConfigProblem`` (the line of the key, or of its nearest ancestor) and raises ``Bad``,
which ``Values.put`` swallows, so every problem in a file is reported in one pass.
"""

from __future__ import annotations

import contextlib
import difflib
import math
import re
import zoneinfo
from datetime import time
from pathlib import Path
from typing import TYPE_CHECKING, Any

from watcher.config.model import REGEX_PREFIX, WESTGARD_RULES, Range, metric_path_problem
from watcher.config.regexes import regex_problem
from watcher.config.yamllines import KeyPath, format_path
from watcher.errors import ConfigProblem
from watcher.records import Severity

if TYPE_CHECKING:
    from collections.abc import Callable, Mapping

SEVERITIES = ("notice", "warning", "critical")


class Bad(Exception):
    """A value was wrong; the problem is already recorded."""


_DURATION_PART = r"(\d+(?:\.\d*)?|\.\d+)\s*(d|h|min|s)"
_DURATION_RE = re.compile(rf"^\s*(?:{_DURATION_PART}\s*)+$")
_DURATION_UNIT_S = {"d": 86400.0, "h": 3600.0, "min": 60.0, "s": 1.0}
_TIME_RE = re.compile(r"^([01]?[0-9]|2[0-3]):([0-5][0-9])$")
# Syntax only, as watcher.measure.ions reads them; elements and residues are checked when the
# ions are resolved (that needs pyteomics, which `validate` does not load).
_ADDUCT_TERMS = r"(?:[+-][0-9]*(?:[A-Z][A-Za-z0-9]*|\.))+"
_PATTERNS = {
    "formula": (
        re.compile(r"^(?:[A-Z][a-z]?[0-9]*|\(|\)[0-9]*)+$"),
        "an elemental formula such as C8H10N4O2 or (C2H6SiO)6",
    ),
    "peptide": (
        re.compile(r"^[ACDEFGHIKLMNPQRSTVWYUO]+$", re.IGNORECASE),
        "a peptide in one-letter amino-acid codes such as YGGFL",
    ),
    "adduct": (
        re.compile(rf"^(?:M?{_ADDUCT_TERMS}|\[M?{_ADDUCT_TERMS}\][0-9]*[+-]\.?)$"),
        "an adduct such as +H, +Na, +NH4, -H, +2H, [M+2H]2+, M+. or M-.",
    ),
}


def _is_finite_number(x: Any) -> bool:
    """An int or a finite float, not a bool; ints of any size (YAML reads digits exactly)."""
    if isinstance(x, bool):
        return False
    return isinstance(x, int) or (isinstance(x, float) and math.isfinite(x))


def _bound(x: float) -> str:
    """A Range's bound in a message: ``2592000``, ``0.5``, ``1e+15``."""
    return str(int(x)) if float(x).is_integer() and abs(x) < 1e9 else f"{x:g}"


def _duration_text(seconds: float) -> str:
    """``30d``, ``1h``, ``5min`` or ``300s``: a range's bound the way users write durations."""
    for unit, size_s in _DURATION_UNIT_S.items():
        if seconds >= size_s and (seconds / size_s).is_integer():
            return f"{seconds / size_s:g}{unit}"
    return f"{seconds:g}s"


class Values:
    """Typed readers of YAML values; each records a problem (file, line, key), then raises Bad."""

    def __init__(self, source: str, lines: dict[KeyPath, int], base_dir: Path) -> None:
        self.source = source
        self.lines = lines
        self.base_dir = base_dir
        self.problems: list[ConfigProblem] = []

    # -- bookkeeping -------------------------------------------------------------------------

    def line(self, path: KeyPath) -> int | None:
        """The line of ``path``, or of its nearest ancestor that has one."""
        while path:
            if path in self.lines:
                return self.lines[path]
            path = path[:-1]
        return None

    def problem(self, path: KeyPath, message: str, *, line_of: KeyPath | None = None) -> None:
        line = self.line(path if line_of is None else line_of)
        self.problems.append(ConfigProblem(self.source, line, format_path(path), message))

    def fail(self, path: KeyPath, message: str) -> Bad:
        self.problem(path, message)
        return Bad()

    @staticmethod
    def show(value: Any) -> str:
        """A value as the user wrote it in YAML: ``[5, -5]``, ``'text'``, ``null``, ``true``."""
        if value is None:
            return "null"
        if isinstance(value, bool):
            return "true" if value else "false"
        if isinstance(value, list):
            return "[" + ", ".join(Values.show(x) for x in value) + "]"
        if isinstance(value, dict):
            return "a mapping"
        if isinstance(value, float) and value.is_integer() and math.isfinite(value):
            return str(int(value)) if abs(value) < 1e15 else repr(value)
        return repr(value)

    def put(
        self,
        kw: dict[str, Any],
        m: Mapping[str, Any],
        path: KeyPath,
        key: str,
        convert: Callable[[KeyPath, Any], Any],
        *,
        field: str | None = None,
    ) -> None:
        """``kw[field or key] = convert(...)`` when ``key`` is in ``m`` and its value is good."""
        if key not in m:
            return
        with contextlib.suppress(Bad):
            kw[field or key] = convert((*path, key), m[key])

    def is_new_name(self, seen: dict[str, int], name: str, path: KeyPath, what: str) -> bool:
        """False, with a problem, when an earlier item of the same list has this name.

        Args:
            seen: name -> list index of the items read so far; ``name`` is added when new.
            path: the item's key path, ending in the list's key and the item's index.
        """
        if name in seen:
            also = f"{path[-2]}[{seen[name]}]"
            self.problem((*path, "name"), f"duplicate {what} name {name!r} (also {also})")
            return False
        seen[name] = int(path[-1])
        return True

    def require(self, path: KeyPath, m: Mapping[str, Any], key: str) -> bool:
        if key in m:
            return True
        self.problem(path, f"missing required key {key!r}")
        return False

    # -- shapes --------------------------------------------------------------------------------

    def mapping(
        self, path: KeyPath, data: Any, allowed: tuple[str, ...], what: str
    ) -> dict[str, Any] | None:
        """``data`` as a mapping of known keys; unknown keys are problems with a did-you-mean."""
        if data is None:
            return {}
        if not isinstance(data, dict):
            self.problem(path, f"expected a mapping of {what}, got {self.show(data)}")
            return None
        out: dict[str, Any] = {}
        for key, value in data.items():
            if key in allowed:
                out[key] = value
                continue
            nearest = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
            hint = f" (did you mean {nearest[0]!r}?)" if nearest else ""
            self.problem(path, f"unknown key {key!r}{hint}", line_of=(*path, key))
        return out

    def sequence(self, path: KeyPath, data: Any) -> list[Any]:
        if data is None:
            return []
        if not isinstance(data, list):
            self.problem(path, f"expected a list, got {self.show(data)}")
            return []
        return data

    # -- scalars -------------------------------------------------------------------------------

    @staticmethod
    def _low_text(within: Range) -> str:
        """`` > 0`` or `` >= 1``: the lower bound as the messages write it ('' for none)."""
        if within.low is None:
            return ""
        return f" {'>' if within.low_open else '>='} {Values.show(within.low)}"

    @staticmethod
    def _in_range(x: float, within: Range) -> tuple[bool, bool]:
        """(above the low bound, below the high bound) of ``within``."""
        low = -within.high if within.low is None else within.low
        low_ok = x > low if within.low_open else x >= low
        high_ok = x < within.high if within.high_open else x <= within.high
        return low_ok, high_ok

    def _range_fail(self, path: KeyPath, what: str, x: Any, within: Range) -> Bad:
        """The problem for a value outside ``within``; the message names the whole range."""
        if within.low is None:
            span = f"between {_bound(-within.high)} and {_bound(within.high)}"
            return self.fail(path, f"expected {what} {span}, got {self.show(x)}")
        high = f"{'<' if within.high_open else '<='} {_bound(within.high)}"
        return self.fail(
            path, f"expected {what}{self._low_text(within)} and {high}, got {self.show(x)}"
        )

    def number(self, path: KeyPath, x: Any, within: Range) -> float:
        """A finite number in ``within`` (the field's Range in ``watcher.config.model``)."""
        wanted = "a number" + self._low_text(within)
        if not _is_finite_number(x):
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        low_ok, high_ok = self._in_range(x, within)
        if not low_ok and within.low is not None:
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        if not (low_ok and high_ok):
            raise self._range_fail(path, "a number", x, within)
        return float(x)

    def integer(self, path: KeyPath, x: Any, within: Range, *, ne: int | None = None) -> int:
        """An integer in ``within``, other than ``ne`` when given."""
        what = "an integer" + (f" other than {ne}" if ne is not None else "")
        wanted = (
            "an integer" + self._low_text(within) + (f" other than {ne}" if ne is not None else "")
        )
        if isinstance(x, bool) or not isinstance(x, int):
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        low_ok, high_ok = self._in_range(x, within)
        if (not low_ok and within.low is not None) or (ne is not None and x == ne):
            raise self.fail(path, f"expected {wanted}, got {x}")
        if not (low_ok and high_ok):
            raise self._range_fail(path, what, x, within)
        return x

    def boolean(self, path: KeyPath, x: Any) -> bool:
        if not isinstance(x, bool):
            raise self.fail(path, f"expected true or false, got {self.show(x)}")
        return x

    def text(self, path: KeyPath, x: Any) -> str:
        if not isinstance(x, str) or not x.strip():
            raise self.fail(path, f"expected non-empty text, got {self.show(x)}")
        return x

    def texts(self, path: KeyPath, x: Any) -> tuple[str, ...]:
        """One string or a list of strings."""
        items = [x] if isinstance(x, str) else x
        if not isinstance(items, list):
            raise self.fail(path, f"expected text or a list of text, got {self.show(x)}")
        out: list[str] = []
        for i, item in enumerate(items):
            try:
                out.append(self.text((*path, i) if items is x else path, item))
            except Bad:
                continue
        return tuple(out)

    def choice(
        self, path: KeyPath, x: Any, options: tuple[str, ...], *, allow_none: bool = False
    ) -> str | None:
        if x is None and allow_none:
            return None
        if isinstance(x, str) and x in options:
            return x
        nearest = difflib.get_close_matches(str(x), options, n=1, cutoff=0.6)
        hint = f" (did you mean {nearest[0]!r}?)" if nearest else ""
        listed = ", ".join(options)
        raise self.fail(path, f"expected one of {listed}, got {self.show(x)}{hint}")

    def severity(self, path: KeyPath, x: Any) -> Severity:
        return Severity(self.choice(path, x, SEVERITIES) or "")

    def name(self, path: KeyPath, x: Any) -> str:
        """An ion name, which becomes a segment of metric paths."""
        name = self.text(path, x)
        if "." in name or name == "*":
            raise self.fail(
                path,
                f"a name cannot contain '.' or be '*' (it is used in metric paths), got {name!r}",
            )
        return name

    def pattern(self, path: KeyPath, x: Any, kind: str) -> str:
        regex, wanted = _PATTERNS[kind]
        if not isinstance(x, str) or not regex.match(x):
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        return x

    def pair(self, path: KeyPath, x: Any, within: Range) -> tuple[float, float]:
        low_text = f"{self.show(within.low)} <= " if within.low is not None else ""
        wanted = f"[low, high] with {low_text}low < high"
        if not isinstance(x, list) or len(x) != 2:
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        low, high = x
        if not all(_is_finite_number(n) for n in x) or not low < high:
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        if within.low is not None and low < within.low:
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        if not all(all(self._in_range(n, within)) for n in x):
            bound = (
                f"{_bound(within.low)} <= low < high <= {_bound(within.high)}"
                if within.low is not None
                else f"both between {_bound(-within.high)} and {_bound(within.high)}"
            )
            raise self.fail(path, f"expected [low, high] with {bound}, got {self.show(x)}")
        return (float(low), float(high))

    def duration(
        self, path: KeyPath, x: Any, within: Range, *, allow_never: bool = False
    ) -> float | None:
        """Seconds from ``20``, ``20s``, ``30min``, ``4h``, ``2d`` or ``1h30min``, in ``within``
        (which starts at 0: ``low_open`` says whether 0 itself is allowed)."""
        allow_zero = not within.low_open
        wanted = (
            f"a duration {'>= 0' if allow_zero else '> 0'} such as 20s, 30min, 4h, 2d or seconds"
        )
        if allow_never:
            wanted += ", or never"
            if x is None or x == "never":
                return None
        if isinstance(x, str) and _DURATION_RE.match(x):
            seconds = sum(float(n) * _DURATION_UNIT_S[u] for n, u in re.findall(_DURATION_PART, x))
        elif _is_finite_number(x):
            # an int too large for a float is beyond every Range: keep it refusable, not an error
            seconds = float(x) if abs(x) < 1e300 else math.inf
        else:
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        if seconds < 0 or (seconds == 0 and not allow_zero):
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        if seconds > within.high:
            most = f"{_duration_text(within.high)} ({_bound(within.high)} s)"
            raise self.fail(
                path,
                f"expected a duration {'>= 0' if allow_zero else '> 0'} and at most {most}, "
                f"got {self.show(x)}",
            )
        return seconds

    def time_of_day(self, path: KeyPath, x: Any) -> time:
        """ "HH:MM" (00:00-23:59) as a time of day, parsed here once for every use at run time."""
        if not isinstance(x, str) or not _TIME_RE.match(x):
            raise self.fail(
                path, f'expected a time of day as "HH:MM" (00:00-23:59), got {self.show(x)}'
            )
        hours, minutes = x.split(":")
        return time(int(hours), int(minutes))

    def hours(self, path: KeyPath, x: Any) -> tuple[time, time]:
        if not isinstance(x, list) or len(x) != 2:
            raise self.fail(path, f'expected ["HH:MM", "HH:MM"] (start, end), got {self.show(x)}')
        start = self.time_of_day((*path, 0), x[0])
        end = self.time_of_day((*path, 1), x[1])
        if start == end:
            raise self.fail(path, f"expected two different times, got {self.show(x)}")
        return (start, end)

    def timezone(self, path: KeyPath, x: Any) -> str:
        name = self.text(path, x)
        try:
            zoneinfo.ZoneInfo(name)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError) as exc:
            nearest = difflib.get_close_matches(name, zoneinfo.available_timezones(), n=1)
            hint = f" (did you mean {nearest[0]!r}?)" if nearest else ""
            raise self.fail(
                path, f"expected an IANA time zone such as Europe/Oslo or UTC, got {name!r}{hint}"
            ) from exc
        return name

    def path(self, path: KeyPath, x: Any) -> Path:
        """A file or folder; relative ones resolve against the config file's folder."""
        p = Path(self.text(path, x)).expanduser()
        return p if p.is_absolute() else self.base_dir / p

    # -- checks --------------------------------------------------------------------------------

    def metric(self, path: KeyPath, x: Any, calibrants: list[str], ions: list[str]) -> str:
        metric = self.text(path, x)
        message = metric_path_problem(metric, calibrants, ions)
        if message is not None:
            raise self.fail(path, message)
        return metric

    def run_patterns(self, path: KeyPath, x: Any) -> tuple[str, ...]:
        """File-name globs, or ``re:<regex>``."""
        patterns = self.texts(path, x)
        for i, pattern in enumerate(patterns):
            if pattern.startswith(REGEX_PREFIX):
                message = regex_problem(pattern[len(REGEX_PREFIX) :])
                if message is not None:
                    where = (*path, i) if isinstance(x, list) else path
                    self.problem(where, message)
        return patterns

    def westgard(self, path: KeyPath, x: Any) -> tuple[str, ...]:
        rules = self.texts(path, x)
        for i, rule in enumerate(rules):
            if rule not in WESTGARD_RULES:
                where = (*path, i) if isinstance(x, list) else path
                with contextlib.suppress(Bad):
                    self.choice(where, rule, WESTGARD_RULES)
        return tuple(r for r in rules if r in WESTGARD_RULES)

    def names_of(self, path: KeyPath, x: Any, known: set[str], what: str) -> tuple[str, ...]:
        names = self.texts(path, x)
        for i, name in enumerate(names):
            if name not in known:
                where = (*path, i) if isinstance(x, list) else path
                nearest = difflib.get_close_matches(name, sorted(known), n=1, cutoff=0.6)
                hint = f" (did you mean {nearest[0]!r}?)" if nearest else ""
                self.problem(where, f"no {what} is named {name!r}{hint}")
        return names
