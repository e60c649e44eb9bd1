"""YAML config file -> validated ``Config``; every problem is reported with file, line and key.

Steps: read the file (size-capped), parse it with ``watcher.yamllines`` (safe, line numbers),
expand ``${NAME}`` / ``${NAME:-default}`` from ``secrets_file`` and then the environment, and
convert each section into the frozen dataclasses of ``watcher.config``. Conversion never stops at
the first problem: it collects them all and raises one ``ConfigError``. Relative paths resolve
against the config file's folder. List indexes in key paths count from 0.
"""

from __future__ import annotations

import contextlib
import difflib
import math
import operator
import os
import re
import stat
import zoneinfo
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

from watcher.config import (
    WESTGARD_RULES,
    Alerts,
    BaselineSpec,
    Channel,
    Check,
    Condition,
    Config,
    CusumSpec,
    EwmaSpec,
    ExpectedIon,
    ForecastSpec,
    HealthLog,
    Instrument,
    IonSpec,
    Limits,
    SignalSettings,
    Watch,
    metric_path_problem,
)
from watcher.errors import ConfigError, ConfigProblem
from watcher.records import Severity
from watcher.yamllines import KeyPath, format_path, read_yaml, resolve_plain

# A lab config is a few kB; refusing big files up front also stops alias bombs before parsing.
MAX_CONFIG_BYTES = 1024 * 1024

_ION = ("name", "mz", "formula", "peptide", "adduct", "charge", "search_ppm")
_CONDITION_FIELDS = {"is": "is_"}  # YAML key -> dataclass field where they differ
KEYS: dict[str, tuple[str, ...]] = {
    "config": (
        "instrument",
        "watch",
        "state_dir",
        "secrets_file",
        "calibrants",
        "expected_ions",
        "signal",
        "checks",
        "alerts",
        "health_log",
        "limits",
        "digest_at",
        "log_keep_days",
    ),
    "instrument": ("name", "timezone"),
    "watch": (
        "folders",
        "patterns",
        "ignore",
        "recursive",
        "settle_s",
        "polling",
        "poll_interval_s",
        "rescan_interval_s",
        "max_wait_s",
    ),
    "calibrant": _ION,
    "expected_ion": (*_ION, "rt_window_min", "min_intensity"),
    "signal": ("dropout_fraction", "dropout_min_scans"),
    "check": (
        "name",
        "metric",
        "applies_to",
        "against",
        "baseline",
        "notice",
        "warning",
        "critical",
        "for_runs",
        "westgard",
        "westgard_severity",
        "ewma",
        "cusum",
        "forecast",
    ),
    "condition": (
        "above",
        "below",
        "outside",
        "inside",
        "is",
        "below_ratio",
        "above_ratio",
        "diff_above",
        "diff_below",
        "diff_outside",
        "z_above",
        "z_below",
        "z_outside",
    ),
    "baseline": ("runs", "min_runs", "mean", "sd"),
    "ewma": ("lambda", "L"),
    "cusum": ("k", "h"),
    "forecast": ("runs", "warn_within_h", "severity"),
    "alerts": (
        "channels",
        "remind_every",
        "send_cleared",
        "expect_run_every",
        "active_hours",
        "timeout_s",
        "connect_timeout_s",
        "read_timeout_s",
        "retry_for",
        "plots",
    ),
    "channel": ("name", "url", "min_severity", "checks"),
    "health_log": ("dir", "keep_days"),
    "limits": ("parse_timeout_s", "parse_timeout_s_per_gb", "parse_memory_mb", "queue_max"),
}
_BASELINE_ONLY = frozenset(
    {"below_ratio", "above_ratio", "diff_above", "diff_below", "diff_outside"}
    | {"z_above", "z_below", "z_outside"}
)
_SEVERITIES = ("notice", "warning", "critical")
_TRENDS = ("westgard", "ewma", "cusum", "forecast")
_VAR_RE = re.compile(r"\$(\$\{)|\$\{([A-Za-z_][A-Za-z0-9_]*)(?::-([^}]*))?\}")


def load_config(path: Path) -> Config:
    """Read and validate the YAML config at ``path``.

    Raises:
        ConfigError: listing every problem in line order, each naming ``path`` as given.
    """
    source = str(path)
    try:
        size = path.stat().st_size
        if size > MAX_CONFIG_BYTES:
            message = f"refused: {size} bytes is too large for a config (limit {MAX_CONFIG_BYTES})"
            raise ConfigError([ConfigProblem(source, None, "", message)])
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(
            [ConfigProblem(source, None, "", f"cannot read: {exc.strerror}")]
        ) from exc
    except UnicodeDecodeError as exc:
        message = f"cannot read: not UTF-8 text (byte {exc.start})"
        raise ConfigError([ConfigProblem(source, None, "", message)]) from exc
    return load_config_text(text, source=source, base_dir=path.parent)


def load_config_text(
    text: str,
    *,
    source: str,
    base_dir: Path | None = None,
    environ: Mapping[str, str] | None = None,
) -> Config:
    """Validate config YAML given as text.

    Args:
        text: the YAML.
        source: the file name to put in messages and in ``Config.source``.
        base_dir: folder that relative paths resolve against; default: the folder of ``source``.
        environ: variables for ``${NAME}``; default ``os.environ``.
    """
    base = (base_dir if base_dir is not None else Path(source).parent).expanduser().absolute()
    data, lines, problems = read_yaml(text, source=source)
    if problems:
        raise ConfigError(problems)
    values = Values(source, lines, base)
    env = dict(os.environ if environ is None else environ)
    if isinstance(data, dict) and "secrets_file" in data:
        env = _with_secrets(values, data["secrets_file"], env)
    if isinstance(data, dict):
        data.pop("secrets_file", None)  # read above; expanding it again would repeat its problems
    data = _expand(values, data, (), env)
    config = _config(values, data, Path(source))
    if values.problems:
        raise ConfigError(values.problems)
    return config


def _with_secrets(v: Values, raw: Any, env: dict[str, str]) -> dict[str, str]:
    """``env`` overlaid with the names in the secrets file (which win over the environment)."""
    path_key: KeyPath = ("secrets_file",)
    known_problems = len(v.problems)
    expanded = _expand(v, raw, path_key, env)
    if len(v.problems) > known_problems:
        return env
    try:
        path = v.path(path_key, expanded)
    except Bad:
        return env
    try:
        mode = path.stat().st_mode
        if mode & (stat.S_IRWXG | stat.S_IRWXO):
            v.problem(
                path_key,
                f"refused: {path} is readable by group or others (mode {stat.S_IMODE(mode):04o});"
                f" run chmod 600 {path}",
            )
            return env
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) else "not UTF-8 text"
        v.problem(path_key, f"cannot read secrets file {path}: {reason}")
        return env
    data, _lines, problems = read_yaml(text, source=str(path))
    v.problems.extend(problems)
    if data is None:
        return env
    if not isinstance(data, dict):
        v.problem(path_key, f"{path}: expected a mapping of NAME: value, got {v.show(data)}")
        return env
    out = dict(env)
    for name, value in data.items():
        if isinstance(value, str | int | float) and not isinstance(value, bool):
            out[name] = str(value)
        else:
            v.problem(path_key, f"{path}: {name}: expected text, got {v.show(value)}")
    return out


def _expand(v: Values, data: Any, path: KeyPath, env: Mapping[str, str]) -> Any:
    """``data`` with ``${NAME}`` and ``${NAME:-default}`` replaced in every string value."""
    if isinstance(data, dict):
        return {k: _expand(v, item, (*path, k), env) for k, item in data.items()}
    if isinstance(data, list):
        return [_expand(v, item, (*path, i), env) for i, item in enumerate(data)]
    if not isinstance(data, str) or "$" not in data:
        return data
    missing: list[str] = []

    def substitute(match: re.Match[str]) -> str:
        if match.group(1):  # "$${" is a literal "${"
            return "${"
        name, default = match.group(2), match.group(3)
        if name in env:
            return env[name]
        if default is not None:
            return default
        missing.append(name)
        return ""

    result = _VAR_RE.sub(substitute, data)
    for name in missing:
        v.problem(
            path,
            f"${{{name}}} is not set in the environment or secrets_file and has no default"
            f" (write ${{{name}:-value}} to give one)",
        )
    if "${" in _VAR_RE.sub("", data):
        v.problem(path, f"expected ${{NAME}} or ${{NAME:-default}}, got {data!r}")
    whole = _VAR_RE.fullmatch(data)
    if whole is not None and not whole.group(1):
        return resolve_plain(result)  # "${PORT:-8080}" alone reads like the plain scalar 8080
    return result


def _config(v: Values, data: Any, source: Path) -> Config:
    if data is None:
        return Config(source=source)
    top = v.mapping((), data, KEYS["config"], "config sections")
    if top is None:
        return Config(source=source)
    kw: dict[str, Any] = {}
    kw["instrument"] = _instrument(v, top.get("instrument"))
    kw["watch"] = _watch(v, top.get("watch"))
    v.put(kw, top, (), "state_dir", lambda p, x: None if x is None else v.path(p, x))
    kw["calibrants"] = _ions(v, top.get("calibrants"), "calibrants", "calibrant")
    expected = _ions(v, top.get("expected_ions"), "expected_ions", "expected_ion")
    kw["expected_ions"] = tuple(ion for ion in expected if isinstance(ion, ExpectedIon))
    kw["signal"] = _section(v, top.get("signal"), ("signal",), SignalSettings, _signal_fields(v))
    kw["checks"] = _checks(v, top.get("checks"), kw["calibrants"], kw["expected_ions"])
    kw["alerts"] = _alerts(v, top.get("alerts"), {c.name for c in kw["checks"]})
    kw["health_log"] = _section(
        v,
        top.get("health_log"),
        ("health_log",),
        HealthLog,
        {
            "dir": lambda p, x: None if x is None else v.path(p, x),
            "keep_days": lambda p, x: v.integer(p, x, ge=1),
        },
    )
    kw["limits"] = _section(
        v,
        top.get("limits"),
        ("limits",),
        Limits,
        {
            "parse_timeout_s": lambda p, x: v.duration(p, x),
            "parse_timeout_s_per_gb": lambda p, x: v.duration(p, x, allow_zero=True),
            "parse_memory_mb": lambda p, x: v.integer(p, x, ge=64),
            "queue_max": lambda p, x: v.integer(p, x, ge=1),
        },
    )
    v.put(kw, top, (), "digest_at", lambda p, x: None if x is None else v.time_of_day(p, x))
    v.put(kw, top, (), "log_keep_days", lambda p, x: v.integer(p, x, ge=1))
    return Config(source=source, **kw)


Converter = Callable[[KeyPath, Any], Any]


def _section(
    v: Values, data: Any, path: KeyPath, cls: Callable[..., Any], fields: dict[str, Converter]
) -> Any:
    """A flat section: each YAML key converted by its converter, defaults for the rest."""
    m = v.mapping(path, data, KEYS[str(path[-1])], f"{path[-1]} keys")
    kw: dict[str, Any] = {}
    for key, convert in fields.items():
        v.put(kw, m or {}, path, key, convert)
    return cls(**kw)


def _signal_fields(v: Values) -> dict[str, Converter]:
    return {
        "dropout_fraction": lambda p, x: v.number(p, x, gt=0, lt=1),
        "dropout_min_scans": lambda p, x: v.integer(p, x, ge=1),
    }


def _instrument(v: Values, data: Any) -> Instrument:
    return _section(  # type: ignore[no-any-return]
        v,
        data,
        ("instrument",),
        Instrument,
        {"name": lambda p, x: v.text(p, x), "timezone": lambda p, x: v.timezone(p, x)},
    )


def _watch(v: Values, data: Any) -> Watch:
    fields: dict[str, Converter] = {
        "folders": lambda p, x: tuple(v.path((*p, i), s) for i, s in enumerate(v.texts(p, x))),
        "patterns": lambda p, x: v.texts(p, x),
        "ignore": lambda p, x: v.texts(p, x),
        "recursive": lambda p, x: v.boolean(p, x),
        "settle_s": lambda p, x: v.duration(p, x),
        "polling": lambda p, x: v.boolean(p, x),
        "poll_interval_s": lambda p, x: v.duration(p, x),
        "rescan_interval_s": lambda p, x: v.duration(p, x),
        "max_wait_s": lambda p, x: v.duration(p, x),
    }
    return _section(v, data, ("watch",), Watch, fields)  # type: ignore[no-any-return]


def _ions(v: Values, data: Any, key: str, kind: str) -> tuple[Any, ...]:
    items = v.sequence((key,), data)
    out: list[Any] = []
    seen: dict[str, int] = {}
    for i, item in enumerate(items):
        path: KeyPath = (key, i)
        m = v.mapping(path, item, KEYS[kind], f"{kind} keys")
        if m is None:
            continue
        ion = _ion(v, path, m)
        if ion is None:
            continue
        if ion.name in seen:
            v.problem(
                (*path, "name"),
                f"duplicate {kind} name {ion.name!r} (also {key}[{seen[ion.name]}])",
            )
            continue
        seen[ion.name] = i
        if kind == "calibrant":
            out.append(ion)
            continue
        kw: dict[str, Any] = {}
        v.put(kw, m, path, "rt_window_min", lambda p, x: v.pair(p, x, ge=0))
        v.put(kw, m, path, "min_intensity", lambda p, x: v.number(p, x, ge=0))
        out.append(ExpectedIon(ion=ion, **kw))
    return tuple(out)


def _ion(v: Values, path: KeyPath, m: dict[str, Any]) -> IonSpec | None:
    kw: dict[str, Any] = {}
    ok = v.require(path, m, "name")
    v.put(kw, m, path, "name", lambda p, x: v.name(p, x))
    ways = [k for k in ("mz", "formula", "peptide") if k in m]
    if not ways:
        v.problem(path, "an ion needs one of mz, formula (with adduct) or peptide (with charge)")
        ok = False
    elif len(ways) > 1:
        v.problem(
            (*path, ways[1]), f"give only one of mz, formula or peptide, got {' and '.join(ways)}"
        )
        ok = False
    v.put(kw, m, path, "mz", lambda p, x: v.number(p, x, gt=0))
    v.put(kw, m, path, "formula", lambda p, x: v.pattern(p, x, "formula"))
    v.put(kw, m, path, "peptide", lambda p, x: v.pattern(p, x, "peptide"))
    v.put(kw, m, path, "adduct", lambda p, x: v.pattern(p, x, "adduct"))
    v.put(kw, m, path, "charge", lambda p, x: v.integer(p, x, ne=0))
    v.put(kw, m, path, "search_ppm", lambda p, x: v.number(p, x, gt=0))
    if "adduct" in m and "mz" in m:
        v.problem((*path, "adduct"), "adduct does not apply to an ion given by mz")
        ok = False
    if not ok or "name" not in kw:
        return None
    return IonSpec(**kw)


def _checks(
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
        if check.name in seen:
            v.problem(
                (*path, "name"),
                f"duplicate check name {check.name!r} (also checks[{seen[check.name]}])",
            )
            continue
        seen[check.name] = i
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
    for severity in _SEVERITIES:
        v.put(kw, m, path, severity, lambda p, x: _condition(v, p, x, is_baseline=is_baseline))
    v.put(kw, m, path, "for_runs", lambda p, x: v.integer(p, x, ge=1))
    v.put(kw, m, path, "westgard", lambda p, x: v.westgard(p, x))
    v.put(kw, m, path, "westgard_severity", lambda p, x: v.severity(p, x))
    v.put(kw, m, path, "ewma", lambda p, x: _small(v, p, x, "ewma"))
    v.put(kw, m, path, "cusum", lambda p, x: _small(v, p, x, "cusum"))
    v.put(kw, m, path, "forecast", lambda p, x: _small(v, p, x, "forecast"))
    if not any(k in m for k in (*_SEVERITIES, *_TRENDS)):
        v.problem(
            path,
            "a check needs a condition (notice, warning or critical) or a trend rule "
            "(westgard, ewma, cusum or forecast)",
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
            v.put(kw, m, path, key, lambda p, x: v.pair(p, x), field=field)
        elif key.endswith("_ratio"):
            v.put(kw, m, path, key, lambda p, x: v.number(p, x, gt=0), field=field)
        else:
            v.put(kw, m, path, key, lambda p, x: v.number(p, x), field=field)
    return Condition(**kw)


def _baseline(v: Values, path: KeyPath, data: Any) -> BaselineSpec:
    m = v.mapping(path, data, KEYS["baseline"], "baseline keys") or {}
    kw: dict[str, Any] = {}
    v.put(kw, m, path, "runs", lambda p, x: v.integer(p, x, ge=1))
    v.put(kw, m, path, "min_runs", lambda p, x: v.integer(p, x, ge=1))
    v.put(kw, m, path, "mean", lambda p, x: v.number(p, x))
    v.put(kw, m, path, "sd", lambda p, x: v.number(p, x, gt=0))
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
        v.put(kw, m, path, "lambda", lambda p, x: v.number(p, x, gt=0, le=1), field="lam")
        v.put(kw, m, path, "L", lambda p, x: v.number(p, x, gt=0))
        return EwmaSpec(**kw)
    if kind == "cusum":
        v.put(kw, m, path, "k", lambda p, x: v.number(p, x, ge=0))
        v.put(kw, m, path, "h", lambda p, x: v.number(p, x, gt=0))
        return CusumSpec(**kw)
    v.put(
        kw, m, path, "runs", lambda p, x: v.integer(p, x, ge=3)
    )  # a line through 2 points is no trend
    v.put(kw, m, path, "warn_within_h", lambda p, x: v.number(p, x, gt=0))
    v.put(kw, m, path, "severity", lambda p, x: v.severity(p, x))
    return ForecastSpec(**kw)


def _alerts(v: Values, data: Any, check_names: set[str]) -> Alerts:
    path: KeyPath = ("alerts",)
    m = v.mapping(path, data, KEYS["alerts"], "alerts keys") or {}
    kw: dict[str, Any] = {}
    v.put(kw, m, path, "channels", lambda p, x: _channels(v, p, x, check_names))
    v.put(
        kw,
        m,
        path,
        "remind_every",
        lambda p, x: v.duration(p, x, allow_never=True),
        field="remind_every_s",
    )
    v.put(kw, m, path, "send_cleared", lambda p, x: v.boolean(p, x))
    v.put(
        kw,
        m,
        path,
        "expect_run_every",
        lambda p, x: v.duration(p, x, allow_never=True),
        field="expect_run_every_s",
    )
    v.put(kw, m, path, "active_hours", lambda p, x: None if x is None else v.hours(p, x))
    for key in ("timeout_s", "connect_timeout_s", "read_timeout_s"):
        v.put(kw, m, path, key, lambda p, x: v.duration(p, x))
    v.put(kw, m, path, "retry_for", lambda p, x: v.duration(p, x), field="retry_for_s")
    v.put(kw, m, path, "plots", lambda p, x: v.boolean(p, x))
    return Alerts(**kw)


def _channels(v: Values, path: KeyPath, data: Any, check_names: set[str]) -> tuple[Channel, ...]:
    out: list[Channel] = []
    seen: dict[str, int] = {}
    for i, item in enumerate(v.sequence(path, data)):
        p_item: KeyPath = (*path, i)
        m = v.mapping(p_item, item, KEYS["channel"], "channel keys")
        if m is None:
            continue
        kw: dict[str, Any] = {}
        ok = v.require(p_item, m, "name") & v.require(p_item, m, "url")
        v.put(kw, m, p_item, "name", lambda p, x: v.text(p, x))
        v.put(kw, m, p_item, "url", lambda p, x: v.text(p, x))
        v.put(kw, m, p_item, "min_severity", lambda p, x: v.severity(p, x))
        v.put(kw, m, p_item, "checks", lambda p, x: v.names_of(p, x, check_names, "check"))
        if not ok or "name" not in kw or "url" not in kw:
            continue
        if kw["name"] in seen:
            v.problem(
                (*p_item, "name"),
                f"duplicate channel name {kw['name']!r} (also channels[{seen[kw['name']]}])",
            )
            continue
        seen[kw["name"]] = i
        out.append(Channel(**kw))
    return tuple(out)


class Bad(Exception):
    """A value was wrong; the problem is already recorded."""


_DURATION_PART = r"(\d+(?:\.\d*)?|\.\d+)\s*(d|h|min|s)"
_DURATION_RE = re.compile(rf"^\s*(?:{_DURATION_PART}\s*)+$")
_DURATION_UNIT_S = {"d": 86400.0, "h": 3600.0, "min": 60.0, "s": 1.0}
_COMPARE: dict[str, Callable[[float, float], bool]] = {
    ">": operator.gt,
    ">=": operator.ge,
    "<": operator.lt,
    "<=": operator.le,
}
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

    def number(
        self,
        path: KeyPath,
        x: Any,
        *,
        gt: float | None = None,
        ge: float | None = None,
        lt: float | None = None,
        le: float | None = None,
    ) -> float:
        bounds = [
            (op, b) for op, b in ((">", gt), (">=", ge), ("<", lt), ("<=", le)) if b is not None
        ]
        wanted = "a number" + " and".join(f" {op} {self.show(b)}" for op, b in bounds)
        if isinstance(x, bool) or not isinstance(x, int | float) or not math.isfinite(x):
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        if not all(_COMPARE[op](x, b) for op, b in bounds):
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        return float(x)

    def integer(
        self, path: KeyPath, x: Any, *, ge: int | None = None, ne: int | None = None
    ) -> int:
        wanted = (
            "an integer"
            + (f" >= {ge}" if ge is not None else "")
            + (f" other than {ne}" if ne is not None else "")
        )
        if isinstance(x, bool) or not isinstance(x, int):
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        if (ge is not None and x < ge) or (ne is not None and x == ne):
            raise self.fail(path, f"expected {wanted}, got {x}")
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
        return Severity(self.choice(path, x, _SEVERITIES) or "")

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

    def pair(self, path: KeyPath, x: Any, *, ge: float | None = None) -> tuple[float, float]:
        wanted = "[low, high] with " + (f"{ge} <= " if ge is not None else "") + "low < high"
        if not isinstance(x, list) or len(x) != 2:
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        low, high = x
        is_num = all(isinstance(n, int | float) and not isinstance(n, bool) for n in x)
        if not is_num or not (math.isfinite(low) and math.isfinite(high)) or not low < high:
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        if ge is not None and low < ge:
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        return (float(low), float(high))

    def duration(
        self, path: KeyPath, x: Any, *, allow_zero: bool = False, allow_never: bool = False
    ) -> float | None:
        """Seconds from ``20``, ``20s``, ``30min``, ``4h``, ``2d`` or ``1h30min``."""
        wanted = (
            f"a duration {'>= 0' if allow_zero else '> 0'} such as 20s, 30min, 4h, 2d or seconds"
        )
        if allow_never:
            wanted += ", or never"
            if x is None or x == "never":
                return None
        if isinstance(x, str) and _DURATION_RE.match(x):
            seconds = sum(float(n) * _DURATION_UNIT_S[u] for n, u in re.findall(_DURATION_PART, x))
        elif isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x):
            seconds = float(x)
        else:
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        if seconds < 0 or (seconds == 0 and not allow_zero):
            raise self.fail(path, f"expected {wanted}, got {self.show(x)}")
        return seconds

    def time_of_day(self, path: KeyPath, x: Any) -> str:
        if not isinstance(x, str) or not _TIME_RE.match(x):
            raise self.fail(
                path, f'expected a time of day as "HH:MM" (00:00-23:59), got {self.show(x)}'
            )
        hours, minutes = x.split(":")
        return f"{int(hours):02d}:{minutes}"

    def hours(self, path: KeyPath, x: Any) -> tuple[str, str]:
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
            if pattern.startswith("re:"):
                try:
                    re.compile(pattern[3:])
                except re.error as exc:
                    where = (*path, i) if isinstance(x, list) else path
                    self.problem(where, f"bad regular expression {pattern[3:]!r}: {exc}")
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
