"""Builders of the ``checks`` section: each check, its conditions, baseline and trend rules.

A check needs a condition (``notice``/``warning``/``critical``) or a trend rule; the baseline
comparisons in a condition need ``against: baseline``; a forecast needs a fixed critical limit to
forecast towards. Metric paths are checked against the calibrants and expected ions defined.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from watcher.config.keys import KEYS
from watcher.config.model import (
    BaselineSpec,
    Check,
    Condition,
    CusumSpec,
    EwmaSpec,
    ExpectedIon,
    ForecastSpec,
    IonSpec,
    is_yes_no_metric,
    range_of,
)
from watcher.config.values import SEVERITIES, Bad, Values

if TYPE_CHECKING:
    from collections.abc import Callable

    from watcher.config.model import Range
    from watcher.config.yamllines import KeyPath

    Converter = Callable[[KeyPath, Any], Any]

_CONDITION_FIELDS = {"is": "is_"}  # YAML key -> dataclass field where they differ
_BASELINE_ONLY = frozenset(
    {"below_ratio", "above_ratio", "diff_above", "diff_below", "diff_outside"}
    | {"z_above", "z_below", "z_outside"}
)
_TRENDS = ("westgard", "ewma", "cusum", "forecast")


def build_checks(
    v: Values, data: Any, calibrants: tuple[IonSpec, ...], ions: tuple[ExpectedIon, ...]
) -> tuple[Check, ...]:
    cal_names = [c.name for c in calibrants]
    ion_names = [e.ion.name for e in ions]
    out: list[Check] = []
    seen: dict[str, int] = {}
    for i, item in enumerate(v.sequence(("checks",), data)):
        path: KeyPath = ("checks", i)
        m = v.mapping(path, item, KEYS["check"], "check keys")
        if m is None:
            continue
        check = _check(v, path, m, cal_names, ion_names)
        if check is None:
            continue
        if not v.is_new_name(seen, check.name, path, "check"):
            continue
        out.append(check)
    return tuple(out)


def _check(
    v: Values, path: KeyPath, m: dict[str, Any], cal_names: list[str], ion_names: list[str]
) -> Check | None:
    kw: dict[str, Any] = {"line": v.line(path)}
    ok = v.require(path, m, "name") & v.require(path, m, "metric")
    v.put(kw, m, path, "name", lambda p, x: v.text(p, x))
    v.put(kw, m, path, "metric", lambda p, x: v.metric(p, x, cal_names, ion_names))
    v.put(kw, m, path, "applies_to", lambda p, x: v.run_patterns(p, x))
    v.put(kw, m, path, "against", lambda p, x: v.choice(p, x, ("baseline",), allow_none=True))
    v.put(kw, m, path, "baseline", lambda p, x: _baseline(v, p, x))
    is_baseline = kw.get("against") == "baseline"
    for severity in SEVERITIES:
        v.put(kw, m, path, severity, lambda p, x: _condition(v, p, x, is_baseline=is_baseline))
    v.put(kw, m, path, "for_runs", lambda p, x: v.integer(p, x, range_of(Check, "for_runs")))
    v.put(kw, m, path, "westgard", lambda p, x: v.westgard(p, x))
    v.put(kw, m, path, "westgard_severity", lambda p, x: v.severity(p, x))
    v.put(kw, m, path, "ewma", lambda p, x: _small(v, p, x, "ewma"))
    v.put(kw, m, path, "cusum", lambda p, x: _small(v, p, x, "cusum"))
    v.put(kw, m, path, "forecast", lambda p, x: _small(v, p, x, "forecast"))
    if not any(k in m for k in (*SEVERITIES, *_TRENDS)):
        v.problem(
            path,
            "a check needs a condition (notice, warning or critical) or a trend rule "
            "(westgard, ewma, cusum or forecast)",
        )
        ok = False
    metric = kw.get("metric")
    if isinstance(metric, str) and is_yes_no_metric(metric):
        for key in (*_TRENDS, "against"):
            if key in m:
                v.problem(
                    (*path, key),
                    f"{key} needs a numeric metric; '{metric}' is yes/no (test it with is: false)",
                )
                ok = False
    critical = kw.get("critical")
    if "forecast" in m and not (
        isinstance(critical, Condition)
        and (critical.above is not None or critical.below is not None or critical.outside)
    ):
        v.problem(
            (*path, "forecast"),
            "a forecast needs a fixed critical limit in the same check "
            "(critical: above, below or outside)",
        )
    if not ok or "name" not in kw or "metric" not in kw:
        return None
    return Check(**kw)


def _condition(v: Values, path: KeyPath, data: Any, *, is_baseline: bool) -> Condition:
    m = v.mapping(path, data, KEYS["condition"], "condition keys")
    if m is None:
        raise Bad
    if not m:
        v.problem(path, f"expected at least one of {', '.join(KEYS['condition'])}, got nothing")
        raise Bad
    kw: dict[str, Any] = {}
    for key in m:
        if key in _BASELINE_ONLY and not is_baseline:
            v.problem(
                (*path, key),
                f"{key} compares with the baseline: add 'against: baseline' to the check",
            )
        field = _CONDITION_FIELDS.get(key, key)
        if key == "is":
            v.put(kw, m, path, key, lambda p, x: v.boolean(p, x), field=field)
        elif key.endswith(("outside", "inside")):
            v.put(kw, m, path, key, _reader(v.pair, range_of(Condition, field)), field=field)
        else:
            v.put(kw, m, path, key, _reader(v.number, range_of(Condition, field)), field=field)
    return Condition(**kw)


def _reader(read: Callable[[KeyPath, Any, Range], Any], within: Range) -> Converter:
    """``read`` bound to one field's Range (a loop variable must not be captured late)."""
    return lambda p, x: read(p, x, within)


def _baseline(v: Values, path: KeyPath, data: Any) -> BaselineSpec:
    m = v.mapping(path, data, KEYS["baseline"], "baseline keys") or {}
    kw: dict[str, Any] = {}
    v.put(kw, m, path, "runs", lambda p, x: v.integer(p, x, range_of(BaselineSpec, "runs")))
    v.put(kw, m, path, "min_runs", lambda p, x: v.integer(p, x, range_of(BaselineSpec, "min_runs")))
    v.put(kw, m, path, "mean", lambda p, x: v.number(p, x, range_of(BaselineSpec, "mean")))
    v.put(kw, m, path, "sd", lambda p, x: v.number(p, x, range_of(BaselineSpec, "sd")))
    spec = BaselineSpec(**kw)
    if "min_runs" in kw and spec.min_runs > spec.runs:
        v.problem(
            (*path, "min_runs"), f"expected min_runs <= runs ({spec.runs}), got {spec.min_runs}"
        )
    if ("mean" in m) != ("sd" in m):
        given, other = ("mean", "sd") if "mean" in m else ("sd", "mean")
        v.problem((*path, given), f"a lab-set baseline needs both mean and sd; {other} is missing")
    return spec


def _small(v: Values, path: KeyPath, data: Any, kind: str) -> Any:
    """The ewma, cusum and forecast blocks; an empty block means all defaults."""
    m = v.mapping(path, data, KEYS[kind], f"{kind} keys") if data is not None else {}
    if m is None:
        raise Bad
    kw: dict[str, Any] = {}
    if kind == "ewma":
        v.put(
            kw,
            m,
            path,
            "lambda",
            lambda p, x: v.number(p, x, range_of(EwmaSpec, "lam")),
            field="lam",
        )
        v.put(kw, m, path, "L", lambda p, x: v.number(p, x, range_of(EwmaSpec, "L")))
        return EwmaSpec(**kw)
    if kind == "cusum":
        v.put(kw, m, path, "k", lambda p, x: v.number(p, x, range_of(CusumSpec, "k")))
        v.put(kw, m, path, "h", lambda p, x: v.number(p, x, range_of(CusumSpec, "h")))
        return CusumSpec(**kw)
    v.put(kw, m, path, "runs", lambda p, x: v.integer(p, x, range_of(ForecastSpec, "runs")))
    v.put(
        kw,
        m,
        path,
        "warn_within_h",
        lambda p, x: v.number(p, x, range_of(ForecastSpec, "warn_within_h")),
    )
    v.put(kw, m, path, "severity", lambda p, x: v.severity(p, x))
    return ForecastSpec(**kw)
