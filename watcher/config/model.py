"""The typed configuration every stage reads; ``load()`` builds it from YAML or raises ConfigError.

The types below are the contract between stages. Loading (safe YAML with line numbers, ``${ENV}``
expansion, validation that names file, line and key) lives in ``watcher/config/load.py``.
Durations are seconds (``*_s``) in the types; users may write ``4h``/``30min``/``20s`` in YAML.
"""

from __future__ import annotations

import dataclasses
import difflib
import functools
import re
from dataclasses import dataclass, field
from fnmatch import fnmatchcase
from pathlib import Path
from typing import TYPE_CHECKING

from watcher.errors import ConfigError, ConfigProblem
from watcher.records import Severity

if TYPE_CHECKING:
    from collections.abc import Iterable, Sequence
    from datetime import time

REGEX_PREFIX = "re:"  # an applies_to entry starting so is a regular expression, not a glob
YAML_KEY = "yaml_key"  # field metadata: the YAML key, where it is not the field's name


def _key(name: str | None) -> dict[str, str | None]:
    """Field metadata naming the field's YAML key; None: set by the loader, not a YAML key.

    Durations are ``*_s`` numbers in the types but written ``4h`` in YAML without the suffix;
    ``is`` and ``lambda`` are Python keywords. ``watcher.config.keys`` reads this."""
    return {YAML_KEY: name}


@dataclass(frozen=True, slots=True, kw_only=True)
class Instrument:
    name: str = "instrument"
    timezone: str = "UTC"  # IANA name; health-log days and the digest follow it
    # m/z / FWHM of the MS1 scans, taken as constant over m/z. Set: the expected M+1/M is the
    # height of the resolved 13C peak (the isotopologues a peak of that width merges with it);
    # None: the whole nominal-mass M+1 cluster, right only for a low-resolution instrument.
    resolving_power: float | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class Watch:
    folders: tuple[Path, ...] = ()
    patterns: tuple[str, ...] = ("*.mzML", "*.mzML.gz", "*.mzXML", "*.mgf")
    ignore: tuple[str, ...] = ("*.tmp", "*.part", "~$*", ".*")
    recursive: bool = True
    settle_s: float = 10.0
    polling: bool = False
    poll_interval_s: float = 10.0
    rescan_interval_s: float = 300.0
    # a file still changing after this long becomes unreadable (a writer that never finishes)
    max_wait_s: float = 86400.0
    # a file unchanged this long but still incomplete is reported unreadable (the copy died)
    stall_s: float = 600.0
    # A link in the export folder to a file elsewhere (/etc/shadow, the config's secrets) is
    # skipped unless this is set: the folder's writers must not choose what the daemon reads.
    follow_symlinks_out: bool = False


@dataclass(frozen=True, slots=True, kw_only=True)
class IonSpec:
    """An ion given one of three ways: ``mz``; ``formula`` + ``adduct`` + ``charge``; ``peptide``.

    ``adduct`` examples: ``+H``, ``+Na``, ``+K``, ``+NH4``, ``-H``; radicals as ``M+.``
    (radical cation: electron removed) and ``M-.`` (radical anion). Resolution to m/z and the
    expected (M+1)/M ratio is done by ``watcher.measure.ions.resolve``.
    """

    name: str
    mz: float | None = None
    formula: str | None = None
    peptide: str | None = None
    adduct: str | None = None
    charge: int = 1  # signed by the adduct's sign for formula ions; peptides: [M+zH]z+
    search_ppm: float = 20.0


@dataclass(frozen=True, slots=True, kw_only=True)
class ExpectedIon:
    ion: IonSpec
    rt_window_min: tuple[float, float] | None = None  # minutes, as users type them
    min_intensity: float = 0.0


@dataclass(frozen=True, slots=True, kw_only=True)
class SignalSettings:
    # an MS1 scan is a dropout when TIC < this x the working TIC (measure.signal.working_tic)
    dropout_fraction: float = 0.1
    dropout_min_scans: int = 1  # shortest run of low scans that counts as a dropout


@dataclass(frozen=True, slots=True, kw_only=True)
class Condition:
    """A condition on one value; exactly the fields that are set are tested (any one true fires).

    Fixed: ``above``, ``below``, ``outside`` [lo, hi], ``inside`` [lo, hi], ``is_`` (bool).
    Against a baseline: ``below_ratio``/``above_ratio`` (value / centre), ``diff_above``/
    ``diff_below``/``diff_outside`` (value - centre), ``z_above``/``z_below``/``z_outside``
    ((value - centre) / sd).
    """

    above: float | None = None
    below: float | None = None
    outside: tuple[float, float] | None = None
    inside: tuple[float, float] | None = None
    is_: bool | None = field(default=None, metadata=_key("is"))
    below_ratio: float | None = None
    above_ratio: float | None = None
    diff_above: float | None = None
    diff_below: float | None = None
    diff_outside: tuple[float, float] | None = None
    z_above: float | None = None
    z_below: float | None = None
    z_outside: tuple[float, float] | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class BaselineSpec:
    """Where a check's centre and spread come from.

    Either the robust statistics of the last ``runs`` accepted runs of the same kind (median and
    1.4826 x MAD), needing at least ``min_runs``; or fixed ``mean`` and ``sd`` set by the lab.
    """

    runs: int = 20
    min_runs: int = 5
    mean: float | None = None
    sd: float | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class EwmaSpec:
    lam: float = field(default=0.2, metadata=_key("lambda"))  # weight of the newest run
    L: float = 3.0  # control-limit width in sigma of the EWMA statistic


@dataclass(frozen=True, slots=True, kw_only=True)
class CusumSpec:
    k: float = 0.5  # allowance, in SD units
    h: float = 5.0  # decision interval, in SD units


@dataclass(frozen=True, slots=True, kw_only=True)
class ForecastSpec:
    runs: int = 10  # K: fit over the last K runs (this one included)
    warn_within_h: float = 12.0  # a finding when the critical limit is reached within this
    severity: Severity = Severity.NOTICE


@dataclass(frozen=True, slots=True, kw_only=True)
class Check:
    name: str
    metric: str  # may contain '*' for one path segment, e.g. calibrant.*.median_ppm
    applies_to: tuple[str, ...] = ()  # file-name globs, or 're:<regex>'; empty = every run
    against: str | None = None  # None (fixed limits) or "baseline"
    baseline: BaselineSpec = field(default_factory=BaselineSpec)
    notice: Condition | None = None
    warning: Condition | None = None
    critical: Condition | None = None
    for_runs: int = 1  # consecutive runs the condition must hold before it fires
    westgard: tuple[str, ...] = ()  # e.g. ("1-3s", "2-2s", "R-4s", "10x")
    westgard_severity: Severity = Severity.WARNING
    ewma: EwmaSpec | None = None
    cusum: CusumSpec | None = None
    forecast: ForecastSpec | None = None
    # where the check starts in the YAML, for messages
    line: int | None = field(default=None, metadata=_key(None))

    def applies_to_file(self, file_name: str) -> bool:
        """Whether this check is evaluated on a run file named ``file_name``."""
        return matches_applies_to(self.applies_to, file_name)


def matches_applies_to(applies_to: Sequence[str], file_name: str) -> bool:
    """Whether a run named ``file_name`` is selected by ``applies_to`` patterns.

    Empty selects every run. An entry ``re:<regex>`` must match the whole name
    (``re.fullmatch``); any other entry is a glob matched case-sensitively
    (``fnmatch.fnmatchcase``), so ``QC_*.mzML`` never matches ``qc_1.mzml`` on one machine and
    not on another. Every stage that asks "does this check apply to this run" calls this one
    function, so judging, alert clearing, history and the digest always agree.
    """
    if not applies_to:
        return True
    for pattern in applies_to:
        if pattern.startswith(REGEX_PREFIX):
            if _compiled(pattern[len(REGEX_PREFIX) :]).fullmatch(file_name):
                return True
        elif fnmatchcase(file_name, pattern):
            return True
    return False


@functools.lru_cache(maxsize=256)
def _compiled(pattern: str) -> re.Pattern[str]:
    # Loaded configs have valid regexes already; this guards checks built in code.
    try:
        return re.compile(pattern)
    except re.error as exc:
        raise ConfigError(
            [ConfigProblem("", None, "applies_to", f"invalid regex {pattern!r}: {exc}")]
        ) from exc


@dataclass(frozen=True, slots=True, kw_only=True)
class Channel:
    name: str
    url: str  # secret: never logged unmasked
    min_severity: Severity = Severity.WARNING
    checks: tuple[str, ...] = ()  # empty = all checks


@dataclass(frozen=True, slots=True, kw_only=True)
class Alerts:
    channels: tuple[Channel, ...] = ()
    # None = never remind
    remind_every_s: float | None = field(default=4 * 3600.0, metadata=_key("remind_every"))
    send_cleared: bool = True
    # the no-run alert; None = off
    expect_run_every_s: float | None = field(default=None, metadata=_key("expect_run_every"))
    # local (start, end), e.g. 18:00 to 08:00: the no-run alert watches only then (may wrap)
    active_hours: tuple[time, time] | None = None
    timeout_s: float = 30.0  # whole notify() call
    connect_timeout_s: float = 10.0  # per URL (apprise cto)
    read_timeout_s: float = 10.0  # per URL (apprise rto)
    # give up on a message older than this
    retry_for_s: float = field(default=24 * 3600.0, metadata=_key("retry_for"))
    # Wait before the first retry of a failed delivery; it doubles per attempt up to the max.
    retry_first_wait_s: float = field(default=5.0, metadata=_key("retry_first_wait"))
    retry_max_wait_s: float = field(default=600.0, metadata=_key("retry_max_wait"))
    plots: bool = False  # attach a PNG of the metric history where the channel takes attachments


@dataclass(frozen=True, slots=True, kw_only=True)
class HealthLog:
    dir: Path | None = None  # default: <state_dir>/health
    keep_days: int = 90


@dataclass(frozen=True, slots=True, kw_only=True)
class Limits:
    """Per-run measuring limits of the child process; both grow with file size."""

    parse_timeout_s: float = 300.0
    parse_timeout_s_per_gb: float = 300.0
    parse_memory_mb: int = 2048
    queue_max: int = 10000
    # Bound on a .mzML.gz's decompressed size: the largest real runs are a few GB inflated, a
    # gzip bomb is 1000 times its file size. Over it, the run is unreadable (kind "too-large").
    max_inflated_mb: int = 20000


@dataclass(frozen=True, slots=True, kw_only=True)
class Config:
    # the YAML file, None for built-in defaults
    source: Path | None = field(default=None, metadata=_key(None))
    instrument: Instrument = field(default_factory=Instrument)
    watch: Watch = field(default_factory=Watch)
    state_dir: Path | None = None
    calibrants: tuple[IonSpec, ...] = ()
    expected_ions: tuple[ExpectedIon, ...] = ()
    signal: SignalSettings = field(default_factory=SignalSettings)
    checks: tuple[Check, ...] = ()
    alerts: Alerts = field(default_factory=Alerts)
    health_log: HealthLog = field(default_factory=HealthLog)
    limits: Limits = field(default_factory=Limits)
    digest_at: time | None = None  # local time of day (YAML "07:30"): the daemon sends the digest
    log_keep_days: int = 30


WESTGARD_RULES: tuple[str, ...] = ("1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10x")
"""Westgard multi-rule names (Westgard, Barry, Hunt, Groth, Clin. Chem. 27 (1981) 493-501)."""


def metric_fields() -> dict[str, tuple[str, ...]]:
    """Metric group -> its value names, derived from the records that ``RunMetrics.flat()`` reads.

    ``signal`` keeps only scalar fields (``flat()`` skips tuples such as ``precursor_charges``);
    ``calibrant`` and ``expected_ion`` drop ``name``, which is a path segment, not a value.
    """
    from watcher.records import CalibrantDrift, ExpectedIonResult, MassCorrection, SignalMetrics

    def scalars(cls: type, *, skip: frozenset[str] = frozenset()) -> tuple[str, ...]:
        return tuple(
            f.name
            for f in dataclasses.fields(cls)
            if f.name not in skip and not str(f.type).startswith("tuple")
        )

    return {
        "signal": scalars(SignalMetrics),
        "calibrant": scalars(CalibrantDrift, skip=frozenset({"name"})),
        "expected_ion": scalars(ExpectedIonResult, skip=frozenset({"name"})),
        "expected_ions": ("found_fraction", "missing_count"),  # aggregates made by flat()
        # flat() writes the fit, not the count of calibrants that went into it
        "mass_correction": scalars(MassCorrection, skip=frozenset({"calibrants_used"})),
    }


def is_yes_no_metric(metric: str) -> bool:
    """Whether ``metric`` names a true/false value (e.g. ``expected_ion.caffeine.found``).

    Derived from the records' field types, like ``metric_fields``: yes/no values can be tested
    with ``is:`` but have no mean, SD or trend.
    """
    from watcher.records import CalibrantDrift, ExpectedIonResult, SignalMetrics

    group, _, rest = metric.partition(".")
    name = rest.rsplit(".", 1)[-1]
    records: dict[str, type] = {
        "signal": SignalMetrics,
        "calibrant": CalibrantDrift,
        "expected_ion": ExpectedIonResult,
    }
    cls = records.get(group)
    if cls is None:
        return False
    return any(
        f.name == name and str(f.type) in ("bool", "bool | None") for f in dataclasses.fields(cls)
    )


def known_metric_paths(calibrants: Iterable[str], expected_ions: Iterable[str]) -> tuple[str, ...]:
    """Every metric path a check may name, with ``*`` standing for any calibrant or expected ion."""
    fields_by_group = metric_fields()
    paths: list[str] = []
    for group in ("signal", "expected_ions", "mass_correction"):
        paths.extend(f"{group}.{name}" for name in fields_by_group[group])
    for group, names in (("calibrant", calibrants), ("expected_ion", expected_ions)):
        for subject in ("*", *names):
            paths.extend(f"{group}.{subject}.{name}" for name in fields_by_group[group])
    return tuple(paths)


def metric_path_problem(
    metric: str, calibrants: Iterable[str], expected_ions: Iterable[str]
) -> str | None:
    """None when ``metric`` names a known value, else a message with the nearest valid path."""
    paths = known_metric_paths(calibrants, expected_ions)
    if metric in paths:
        return None
    message = f"unknown metric {metric!r}"
    nearest = difflib.get_close_matches(metric, paths, n=1, cutoff=0.6)
    if nearest:
        return f"{message} (did you mean {nearest[0]!r}?)"
    return f"{message}; expected signal.<value>, calibrant.<name|*>.<value>, " + (
        "expected_ion.<name|*>.<value>, expected_ions.<value> or mass_correction.<value>"
    )


def state_dir_of(config: Config) -> Path:
    """The state folder: ``state_dir`` from the config, else ``state/`` beside the config file."""
    if config.state_dir is not None:
        return Path(config.state_dir)
    base = config.source.parent if config.source is not None else Path.cwd()
    return base / "state"
