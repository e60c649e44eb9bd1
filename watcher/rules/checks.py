"""Which metric paths a check watches, and whether its condition holds on a value.

- ``applies_to``: which runs a check is evaluated on is ``Check.applies_to_file`` in
  ``watcher.config`` (globs, or ``re:<regex>`` matching the whole name), shared with notify.
- Metric paths: ``*`` stands for one or more characters, so ``calibrant.*.median_ppm`` expands
  to one path per calibrant in ``RunMetrics.flat()`` (names may themselves contain dots).
- Missing values: a metric that is None or NaN was not measured; no condition holds on it, so it
  gives no finding. ``expected_ion.<name>.found`` is a bool wherever MS1 peaks could be searched
  (so ``is: false`` fires on a missing ion), None only in runs without them (MGF, no MS1).
- Conditions: numeric fields test only numbers and ``is`` tests only booleans; the baseline
  fields (ratio, difference, z) hold only when a baseline exists, and z only when its SD > 0.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

from watcher.config import Condition

if TYPE_CHECKING:
    from collections.abc import Iterable

    from watcher.rules.baseline import Baseline

Value = float | bool | None
Bounds = tuple[float, float]


@functools.lru_cache(maxsize=256)
def _metric_regex(pattern: str) -> re.Pattern[str]:
    return re.compile(".+".join(re.escape(part) for part in pattern.split("*")))


def expand(pattern: str, paths: Iterable[str]) -> list[str]:
    """The concrete metric paths that ``pattern`` names, in the order of ``paths``."""
    if "*" not in pattern:
        return [p for p in paths if p == pattern]
    regex = _metric_regex(pattern)
    return [p for p in paths if regex.fullmatch(p)]


def matches_metric(pattern: str, path: str) -> bool:
    """Whether a check's metric pattern names the concrete metric path (as ``expand`` reads it)."""
    return bool(expand(pattern, (path,)))


def is_missing(value: Value) -> bool:
    """A value that was not measured: None or NaN."""
    return value is None or (isinstance(value, float) and math.isnan(value))


@dataclass(frozen=True, slots=True, kw_only=True)
class Hit:
    """The part of a condition that held.

    Attributes:
        field: the condition field (``outside``, ``below_ratio``, ``z_above``, ...).
        threshold: its configured value.
        compared: the number compared with it: the value itself, value / centre, value - centre
            or the z-score.
        limit: short text of the limit, e.g. ``outside [-5, 5]``, ``below 0.3 x baseline``.
    """

    field: str
    threshold: float | Bounds | bool
    compared: float | bool
    limit: str


def _num(x: float) -> str:
    return f"{x:g}"


def _bounds(b: Bounds) -> str:
    return f"[{_num(b[0])}, {_num(b[1])}]"


def limit_text(field: str, threshold: float | Bounds | bool) -> str:
    """Short text for one condition field, as shown in ``Finding.limit``."""
    if isinstance(threshold, bool):
        return f"is {str(threshold).lower()}"
    if isinstance(threshold, tuple):
        prefix = {"diff_outside": "baseline difference ", "z_outside": "z "}.get(field, "")
        word = "inside" if field == "inside" else "outside"
        return f"{prefix}{word} {_bounds(threshold)}"
    texts = {
        "above": f"above {_num(threshold)}",
        "below": f"below {_num(threshold)}",
        "below_ratio": f"below {_num(threshold)} x baseline",
        "above_ratio": f"above {_num(threshold)} x baseline",
        "diff_above": f"baseline difference above {_num(threshold)}",
        "diff_below": f"baseline difference below {_num(threshold)}",
        "z_above": f"z above {_num(threshold)}",
        "z_below": f"z below {_num(threshold)}",
    }
    return texts[field]


def _holds(field: str, threshold: float | Bounds, x: float) -> bool:
    if isinstance(threshold, tuple):
        lo, hi = threshold
        inside = lo <= x <= hi
        return inside if field == "inside" else not inside
    if field.endswith("above"):
        return x > threshold
    if field == "above_ratio":
        return x > threshold
    return x < threshold  # below, below_ratio, diff_below, z_below


def _compared(field: str, value: float, baseline: Baseline | None) -> float | None:
    if field in ("above", "below", "outside", "inside"):
        return value
    if baseline is None:
        return None
    if field.endswith("_ratio"):
        return value / baseline.centre if baseline.centre != 0.0 else None
    if field.startswith("diff_"):
        return value - baseline.centre
    return baseline.z(value)  # z_*


def evaluate(condition: Condition, value: Value, baseline: Baseline | None = None) -> Hit | None:
    """The first field of ``condition`` (in declaration order) that holds for ``value``, or None.

    Args:
        condition: the severity's condition.
        value: the measured value; None/NaN never satisfies anything.
        baseline: the check's baseline, needed by the ratio, difference and z fields.
    """
    if is_missing(value):
        return None
    for f in dataclasses.fields(Condition):
        threshold = getattr(condition, f.name)
        if threshold is None:
            continue
        name = f.name.rstrip("_")  # the YAML key ``is`` is the field ``is_``
        if name == "is":
            if isinstance(value, bool) and value == threshold:
                return Hit(
                    field=name,
                    threshold=threshold,
                    compared=value,
                    limit=limit_text(name, threshold),
                )
            continue
        if isinstance(value, bool) or value is None:
            continue
        compared = _compared(name, float(value), baseline)
        if compared is None or not math.isfinite(compared):
            continue
        bounds: float | Bounds = (
            (float(threshold[0]), float(threshold[1]))
            if isinstance(threshold, list | tuple)
            else float(threshold)
        )
        if _holds(name, bounds, compared):
            return Hit(
                field=name,
                threshold=bounds,
                compared=compared,
                limit=limit_text(name, bounds),
            )
    return None


def needs_baseline(condition: Condition | None) -> bool:
    """Whether the condition has a ratio, difference or z field."""
    if condition is None:
        return False
    return any(
        getattr(condition, f.name) is not None
        for f in dataclasses.fields(Condition)
        if f.name.endswith("_ratio") or f.name.startswith(("diff_", "z_"))
    )


def critical_bounds(condition: Condition | None) -> tuple[float | None, float | None]:
    """(upper, lower): the fixed values beyond which a run is critical, for the forecast."""
    if condition is None:
        return None, None
    upper = condition.above
    lower = condition.below
    if condition.outside is not None:
        lo, hi = condition.outside
        upper = hi if upper is None else min(upper, hi)
        lower = lo if lower is None else max(lower, lo)
    return upper, lower
