"""Builders of the config sections other than ``checks``: YAML mappings -> ``watcher.config`` types.

Each builder reads one section through ``Values`` (which records every bad value and goes on)
and falls back to the dataclass defaults for keys that are missing or bad.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

from watcher.config.checks import build_checks
from watcher.config.keys import KEYS
from watcher.config.maintenance import build_maintenance, build_reset_kinds
from watcher.config.model import (
    CONVERT_PLACEHOLDERS,
    Alerts,
    Central,
    Channel,
    Config,
    Convert,
    ExpectedIon,
    HealthLog,
    Instrument,
    IonSpec,
    Limits,
    Listen,
    MetricsConfig,
    Serve,
    SignalSettings,
    Watch,
    range_of,
)
from watcher.config.yamllines import KeyPath

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.config.values import Values


def build_config(v: Values, data: Any, source: Path) -> Config:
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
    kw["checks"] = build_checks(v, top.get("checks"), kw["calibrants"], kw["expected_ions"])
    kw["alerts"] = _alerts(v, top.get("alerts"), {c.name for c in kw["checks"]})
    kw["health_log"] = _section(
        v,
        top.get("health_log"),
        ("health_log",),
        HealthLog,
        {
            "dir": lambda p, x: None if x is None else v.path(p, x),
            "keep_days": lambda p, x: v.integer(p, x, range_of(HealthLog, "keep_days")),
        },
    )
    kw["limits"] = _section(
        v,
        top.get("limits"),
        ("limits",),
        Limits,
        {
            "parse_timeout_s": lambda p, x: v.duration(p, x, range_of(Limits, "parse_timeout_s")),
            "parse_timeout_s_per_gb": lambda p, x: v.duration(
                p, x, range_of(Limits, "parse_timeout_s_per_gb")
            ),
            "parse_memory_mb": lambda p, x: v.integer(p, x, range_of(Limits, "parse_memory_mb")),
            "queue_max": lambda p, x: v.integer(p, x, range_of(Limits, "queue_max")),
            "max_inflated_mb": lambda p, x: v.integer(p, x, range_of(Limits, "max_inflated_mb")),
            "workers": lambda p, x: v.integer(p, x, range_of(Limits, "workers")),
        },
    )
    kw["central"] = _central(v, top.get("central"))
    kw["convert"] = _convert(v, top.get("convert"))
    v.put(kw, top, (), "digest_at", lambda p, x: None if x is None else v.time_of_day(p, x))
    v.put(
        kw,
        top,
        (),
        "log_keep_days",
        lambda p, x: v.integer(p, x, range_of(Config, "log_keep_days")),
    )
    checks_and_pseudo = {c.name for c in kw["checks"]} | {"unreadable", "heartbeat"}
    kw["maintenance"] = build_maintenance(v, top.get("maintenance"), checks_and_pseudo)
    v.put(kw, top, (), "reset_baselines_on", lambda p, x: build_reset_kinds(v, p, x))
    kw["metrics"] = _section(
        v,
        top.get("metrics"),
        ("metrics",),
        MetricsConfig,
        {"listen": lambda p, x: None if x is None else listen_address(v, p, x)},
    )
    kw["serve"] = _section(
        v,
        top.get("serve"),
        ("serve",),
        Serve,
        {
            "listen": lambda p, x: listen_address(v, p, x),
            "token": lambda p, x: None if x is None else _token(v, p, x),
            "refresh_s": lambda p, x: v.duration(p, x, range_of(Serve, "refresh_s")),
        },
    )
    return Config(source=source, **kw)


# A token shorter than this is guessable by trying; 16 characters of a random password
# generator are about 95 bits (common practice: `openssl rand -hex 16` gives 32).
MIN_TOKEN_CHARS = 16


def _token(v: Values, path: KeyPath, x: Any) -> str:
    text = v.text(path, x)
    if len(text) < MIN_TOKEN_CHARS or any(c.isspace() for c in text):
        # The value itself is a secret: the message never quotes it.
        raise v.fail(
            path,
            f"expected a token of at least {MIN_TOKEN_CHARS} characters without spaces "
            "(e.g. the output of `openssl rand -hex 16`)",
        )
    return text


def listen_address(v: Values, path: KeyPath, x: Any) -> Listen:
    """``"HOST:PORT"`` (``"[::1]:PORT"`` for IPv6) -> Listen; the host must be an IP address or
    ``localhost``, so that a typo never becomes a DNS lookup at start-up."""
    import ipaddress

    text = v.text(path, x).strip()
    host, sep, port_text = text.rpartition(":")
    if host.startswith("[") and host.endswith("]"):
        host = host[1:-1]
    expected = 'expected "HOST:PORT" such as "127.0.0.1:9464"'
    if not sep or not host:
        raise v.fail(path, f"{expected}, got {v.show(x)}")
    if host != "localhost":
        try:
            ipaddress.ip_address(host)
        except ValueError:
            raise v.fail(
                path, f"{expected}: the host must be an IP address or localhost, got {host!r}"
            ) from None
    if not port_text.isdigit():
        raise v.fail(path, f"{expected}: the port must be a number, got {port_text!r}")
    port = v.integer(path, int(port_text), range_of(Listen, "port"))
    return Listen(host=host, port=port)


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
        "dropout_fraction": lambda p, x: v.number(
            p, x, range_of(SignalSettings, "dropout_fraction")
        ),
        "dropout_min_scans": lambda p, x: v.integer(
            p, x, range_of(SignalSettings, "dropout_min_scans")
        ),
    }


def _instrument(v: Values, data: Any) -> Instrument:
    return _section(  # type: ignore[no-any-return]
        v,
        data,
        ("instrument",),
        Instrument,
        {
            "name": lambda p, x: v.text(p, x),
            "timezone": lambda p, x: v.timezone(p, x),
            "resolving_power": lambda p, x: (
                None if x is None else v.number(p, x, range_of(Instrument, "resolving_power"))
            ),
        },
    )


def _watch(v: Values, data: Any) -> Watch:
    fields: dict[str, Converter] = {
        "folders": lambda p, x: tuple(v.path((*p, i), s) for i, s in enumerate(v.texts(p, x))),
        "patterns": lambda p, x: v.texts(p, x),
        "ignore": lambda p, x: v.texts(p, x),
        "recursive": lambda p, x: v.boolean(p, x),
        "settle_s": lambda p, x: v.duration(p, x, range_of(Watch, "settle_s")),
        "polling": lambda p, x: v.boolean(p, x),
        "poll_interval_s": lambda p, x: v.duration(p, x, range_of(Watch, "poll_interval_s")),
        "rescan_interval_s": lambda p, x: v.duration(p, x, range_of(Watch, "rescan_interval_s")),
        "max_wait_s": lambda p, x: v.duration(p, x, range_of(Watch, "max_wait_s")),
        "stall_s": lambda p, x: v.duration(p, x, range_of(Watch, "stall_s")),
        "follow_symlinks_out": lambda p, x: v.boolean(p, x),
    }
    return _section(v, data, ("watch",), Watch, fields)  # type: ignore[no-any-return]


def _ions(v: Values, data: Any, key: str, kind: str) -> tuple[Any, ...]:
    items = v.sequence((key,), data)
    out: list[Any] = []
    seen: dict[str, int] = {}
    lines: dict[str, KeyPath] = {}
    for i, item in enumerate(items):
        path: KeyPath = (key, i)
        m = v.mapping(path, item, KEYS[kind], f"{kind} keys")
        if m is None:
            continue
        ion = _ion(v, path, m)
        if ion is None:
            continue
        if not v.is_new_name(seen, ion.name, path, kind):
            continue
        if kind == "calibrant":
            out.append(ion)
            continue
        kw: dict[str, Any] = {}
        v.put(
            kw,
            m,
            path,
            "rt_window_min",
            lambda p, x: v.pair(p, x, range_of(ExpectedIon, "rt_window_min")),
        )
        v.put(
            kw,
            m,
            path,
            "min_intensity",
            lambda p, x: v.number(p, x, range_of(ExpectedIon, "min_intensity")),
        )
        for number in ("product_mz", "tolerance_mz", "expected_ratio"):
            v.put(kw, m, path, number, _number_of(v, number))
        v.put(kw, m, path, "ratio_to", lambda p, x: v.text(p, x))
        if "product_mz" not in m:
            for only in ("tolerance_mz", "ratio_to", "expected_ratio"):
                if only in m:
                    v.problem(
                        (*path, only), f"{only} applies to transitions only (give product_mz)"
                    )
        out.append(ExpectedIon(ion=ion, **kw))
        lines[ion.name] = path
    if kind == "expected_ion":
        _check_transitions(v, out, lines)
    return tuple(out)


def _number_of(v: Values, key: str) -> Converter:
    within = range_of(ExpectedIon, key)
    return lambda p, x: v.number(p, x, within)


def _check_transitions(v: Values, ions: list[Any], paths: dict[str, KeyPath]) -> None:
    """ratio_to names another transition; expected_ratio goes with ratio_to."""
    transitions = {ion.ion.name for ion in ions if ion.is_transition}
    for ion in ions:
        path = paths[ion.ion.name]
        if not ion.is_transition:
            continue
        if ion.expected_ratio is not None and ion.ratio_to is None:
            v.problem((*path, "expected_ratio"), "expected_ratio needs ratio_to")
        if ion.ratio_to is None:
            continue
        if ion.ratio_to == ion.ion.name:
            v.problem(
                (*path, "ratio_to"), f"ratio_to names the transition itself ({ion.ratio_to!r})"
            )
        elif ion.ratio_to not in transitions:
            known = ", ".join(sorted(transitions - {ion.ion.name})) or "none"
            v.problem(
                (*path, "ratio_to"),
                f"ratio_to {ion.ratio_to!r} is not a transition (expected ion with product_mz); "
                f"transitions: {known}",
            )


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
    v.put(kw, m, path, "mz", lambda p, x: v.number(p, x, range_of(IonSpec, "mz")))
    v.put(kw, m, path, "formula", lambda p, x: v.pattern(p, x, "formula"))
    v.put(kw, m, path, "peptide", lambda p, x: v.pattern(p, x, "peptide"))
    v.put(kw, m, path, "adduct", lambda p, x: v.pattern(p, x, "adduct"))
    v.put(kw, m, path, "charge", lambda p, x: v.integer(p, x, range_of(IonSpec, "charge"), ne=0))
    v.put(kw, m, path, "search_ppm", lambda p, x: v.number(p, x, range_of(IonSpec, "search_ppm")))
    if "adduct" in m and "mz" in m:
        v.problem((*path, "adduct"), "adduct does not apply to an ion given by mz")
        ok = False
    if not ok or "name" not in kw:
        return None
    return IonSpec(**kw)


def _alerts(v: Values, data: Any, check_names: set[str]) -> Alerts:
    path: KeyPath = ("alerts",)
    m = v.mapping(path, data, KEYS["alerts"], "alerts keys") or {}
    kw: dict[str, Any] = {}
    v.put(kw, m, path, "channels", lambda p, x: _channels(v, p, x, check_names))

    def seconds(field: str, *, allow_never: bool = False) -> Converter:
        within = range_of(Alerts, field)
        return lambda p, x: v.duration(p, x, within, allow_never=allow_never)

    v.put(
        kw,
        m,
        path,
        "remind_every",
        seconds("remind_every_s", allow_never=True),
        field="remind_every_s",
    )
    v.put(kw, m, path, "send_cleared", lambda p, x: v.boolean(p, x))
    v.put(
        kw,
        m,
        path,
        "expect_run_every",
        seconds("expect_run_every_s", allow_never=True),
        field="expect_run_every_s",
    )
    v.put(kw, m, path, "active_hours", lambda p, x: None if x is None else v.hours(p, x))
    for key in ("timeout_s", "connect_timeout_s", "read_timeout_s"):
        v.put(kw, m, path, key, seconds(key))
    v.put(kw, m, path, "retry_for", seconds("retry_for_s"), field="retry_for_s")
    v.put(
        kw, m, path, "retry_first_wait", seconds("retry_first_wait_s"), field="retry_first_wait_s"
    )
    v.put(kw, m, path, "retry_max_wait", seconds("retry_max_wait_s"), field="retry_max_wait_s")
    v.put(kw, m, path, "plots", lambda p, x: v.boolean(p, x))
    alerts = Alerts(**kw)
    if alerts.retry_first_wait_s > alerts.retry_max_wait_s:
        key = "retry_first_wait" if "retry_first_wait" in m else "retry_max_wait"
        v.problem(
            (*path, key),
            f"retry_first_wait ({alerts.retry_first_wait_s:g} s) is longer than "
            f"retry_max_wait ({alerts.retry_max_wait_s:g} s)",
        )
    return alerts


# libpq's URI schemes (PostgreSQL documentation, "Connection URIs", section 34.1.1.2).
_CENTRAL_SCHEMES = ("postgresql://", "postgres://")


def _central_url(v: Values, path: KeyPath, x: Any) -> str | None:
    """The central store's URL; a problem never repeats the value (it may hold a password)."""
    if x is None:
        return None
    if not isinstance(x, str) or not x.strip():
        raise v.fail(path, "expected a postgresql://user@host:port/db URL")
    if not x.startswith(_CENTRAL_SCHEMES):
        raise v.fail(path, "expected a URL starting postgresql:// (the value is not shown)")
    return x


def _duration_in(v: Values, within: Any) -> Converter:
    return lambda p, x: v.duration(p, x, within)


def _central(v: Values, data: Any) -> Central:
    path: KeyPath = ("central",)
    m = v.mapping(path, data, KEYS["central"], "central keys") or {}
    kw: dict[str, Any] = {}
    v.put(kw, m, path, "url", lambda p, x: _central_url(v, p, x))
    v.put(
        kw,
        m,
        path,
        "connect_timeout_s",
        lambda p, x: v.duration(p, x, range_of(Central, "connect_timeout_s")),
    )
    v.put(kw, m, path, "batch_max", lambda p, x: v.integer(p, x, range_of(Central, "batch_max")))
    for key in ("retry_first_wait", "retry_max_wait"):
        within = range_of(Central, f"{key}_s")
        v.put(kw, m, path, key, _duration_in(v, within), field=f"{key}_s")
    central = Central(**kw)
    if central.retry_first_wait_s > central.retry_max_wait_s:
        key = "retry_first_wait" if "retry_first_wait" in m else "retry_max_wait"
        v.problem(
            (*path, key),
            f"retry_first_wait ({central.retry_first_wait_s:g} s) is longer than "
            f"retry_max_wait ({central.retry_max_wait_s:g} s)",
        )
    return central


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
        if not v.is_new_name(seen, kw["name"], p_item, "channel"):
            continue
        out.append(Channel(**kw))
    return tuple(out)


def _convert(v: Values, data: Any) -> Convert:
    section: Convert = _section(
        v,
        data,
        ("convert",),
        Convert,
        {
            "patterns": lambda p, x: v.texts(p, x),
            "command": lambda p, x: _convert_command(v, p, x),
            "timeout_s": lambda p, x: v.duration(p, x, range_of(Convert, "timeout_s")),
        },
    )
    if section.patterns and not section.command:
        v.problem(("convert",), "convert.patterns is set but convert.command is not")
    return section


def _convert_command(v: Values, path: KeyPath, x: Any) -> tuple[str, ...]:
    """The converter's argv: a list (no shell), ``{output_dir}`` in it, no other placeholder.

    A program given with a folder (``./tools/convert``) resolves against the config's folder;
    a bare name is looked up in PATH when it runs (``ionwarden validate`` checks both).
    """
    if not isinstance(x, list) or not x:
        raise v.fail(path, f"expected a list: [program, arg, ...], got {v.show(x)}")
    argv = list(v.texts(path, x))
    if len(argv) != len(x):
        raise v.fail(path, "every item of the command must be non-empty text")
    for i, arg in enumerate(argv):
        for token in re.findall(r"\{[^{}]*\}", arg):
            if token not in CONVERT_PLACEHOLDERS:
                raise v.fail(
                    (*path, i), f"unknown placeholder {token}; use {{input}} and {{output_dir}}"
                )
    if not any("{output_dir}" in arg for arg in argv):
        raise v.fail(path, "the command must name {output_dir}, where the converter writes")
    if "/" in argv[0] and "{" not in argv[0]:
        argv[0] = str(v.path((*path, 0), argv[0]))
    return tuple(argv)
