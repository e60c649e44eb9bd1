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

from watcher import kinds
from watcher.errors import ConfigError, ConfigProblem
from watcher.records import Severity

if TYPE_CHECKING:
    from collections.abc import Iterable, Sequence
    from datetime import datetime, time

REGEX_PREFIX = "re:"  # an applies_to entry starting so is a regular expression, not a glob
YAML_KEY = "yaml_key"  # field metadata: the YAML key, where it is not the field's name
RANGE = "range"  # field metadata: the Range of values validation accepts for a number
# Longest file name a regex is matched against: Python's re has no time limit, so together with
# the shapes refused at validation (watcher.config.regexes) this bounds a match's worst case.
# 255 is NAME_MAX on Linux file systems: no run file has a longer name.
MAX_MATCHED_NAME_CHARS = 255

_HOUR_S = 3600.0
_DAY_S = 86400.0
# Measured values a threshold or lab-set baseline compares with: intensities and TIC sums stay
# far below this; a larger number is a typing slip (extra digits), not a limit.
_MAX_MAGNITUDE = 1e15


@dataclass(frozen=True, slots=True)
class Range:
    """The values a number in the config may take, ``low`` to ``high``.

    Every number has one, so a slip such as 26 extra digits in ``settle_s`` is refused at
    validation instead of breaking every run later. ``low`` is None for numbers bounded by
    magnitude only (``-high`` to ``high``).
    """

    low: float | None
    high: float
    low_open: bool = False  # low itself is refused (``> 0``)
    high_open: bool = False  # high itself is refused (``< 1``)


def _key(name: str | None, within: Range | None = None) -> dict[str, object]:
    """Field metadata naming the field's YAML key; None: set by the loader, not a YAML key.

    Durations are ``*_s`` numbers in the types but written ``4h`` in YAML without the suffix;
    ``is`` and ``lambda`` are Python keywords. ``watcher.config.keys`` reads this."""
    meta: dict[str, object] = {YAML_KEY: name}
    if within is not None:
        meta[RANGE] = within
    return meta


def _within(
    low: float | None, high: float, *, low_open: bool = False, high_open: bool = False
) -> dict[str, object]:
    """Field metadata: the field's Range (the YAML key is the field's name)."""
    return {RANGE: Range(low, high, low_open=low_open, high_open=high_open)}


def _positive(high: float) -> dict[str, object]:
    return _within(0, high, low_open=True)


def _magnitude(high: float = _MAX_MAGNITUDE) -> dict[str, object]:
    return _within(None, high)


def range_of(record: type, name: str) -> Range:
    """The Range of a numeric field of a config record (the one table of allowed values).

    Raises:
        KeyError: the field has no Range (a new number must get one).
    """
    for f in dataclasses.fields(record):
        if f.name == name:
            within = f.metadata.get(RANGE)
            if isinstance(within, Range):
                return within
    raise KeyError(f"{record.__name__}.{name} has no Range")


@dataclass(frozen=True, slots=True, kw_only=True)
class Instrument:
    name: str = "instrument"
    timezone: str = "UTC"  # IANA name; health-log days and the digest follow it
    # m/z / FWHM of the MS1 scans, taken as constant over m/z. Set: the expected M+1/M is the
    # height of the resolved 13C peak (the isotopologues a peak of that width merges with it);
    # None: the whole nominal-mass M+1 cluster, right only for a low-resolution instrument.
    resolving_power: float | None = field(default=None, metadata=_within(100, 1e7))


@dataclass(frozen=True, slots=True, kw_only=True)
class Watch:
    folders: tuple[Path, ...] = ()
    patterns: tuple[str, ...] = ("*.mzML", "*.mzML.gz", "*.mzXML", "*.mgf")
    ignore: tuple[str, ...] = ("*.tmp", "*.part", "~$*", ".*")
    recursive: bool = True
    settle_s: float = field(default=10.0, metadata=_positive(_DAY_S))
    polling: bool = False
    poll_interval_s: float = field(default=10.0, metadata=_positive(_HOUR_S))
    rescan_interval_s: float = field(default=300.0, metadata=_positive(7 * _DAY_S))
    # a file still changing after this long becomes unreadable (a writer that never finishes)
    max_wait_s: float = field(default=86400.0, metadata=_positive(30 * _DAY_S))
    # a file unchanged this long but still incomplete is reported unreadable (the copy died)
    stall_s: float = field(default=600.0, metadata=_positive(30 * _DAY_S))
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
    # m/z of singly charged ions above 100 000 is beyond every mass analyser
    mz: float | None = field(default=None, metadata=_positive(100_000.0))
    formula: str | None = None
    peptide: str | None = None
    adduct: str | None = None
    # signed by the adduct's sign for formula ions; peptides: [M+zH]z+
    charge: int = field(default=1, metadata=_magnitude(100))
    # 1e6 ppm is a window as wide as the m/z itself: beyond it the window reaches below zero
    search_ppm: float = field(default=20.0, metadata=_positive(1e6))


@dataclass(frozen=True, slots=True, kw_only=True)
class ExpectedIon:
    ion: IonSpec
    # minutes, as users type them; a week of gradient is far beyond any LC run
    rt_window_min: tuple[float, float] | None = field(
        default=None, metadata=_within(0, 7 * 24 * 60.0)
    )
    min_intensity: float = field(default=0.0, metadata=_within(0, _MAX_MAGNITUDE))
    # A transition (SRM/MRM): the ion is the precursor, this the product ion's m/z. It is looked
    # for in the run's chromatograms, matched on both isolation targets within tolerance_mz.
    product_mz: float | None = field(default=None, metadata=_positive(100_000.0))
    # Unit-resolution quadrupoles isolate about 0.7 m/z FWHM and methods write targets to 0.1:
    # half a unit tells neighbouring transitions apart (common practice).
    tolerance_mz: float = field(default=0.5, metadata=_positive(100.0))
    # Ion ratio: this transition's peak area / the area of the transition named here
    ratio_to: str | None = None
    expected_ratio: float | None = field(default=None, metadata=_positive(1e6))

    @property
    def is_transition(self) -> bool:
        """Looked for in chromatograms (precursor + product), not in MS1 spectra."""
        return self.product_mz is not None


@dataclass(frozen=True, slots=True, kw_only=True)
class SignalSettings:
    # an MS1 scan is a dropout when TIC < this x the working TIC (measure.signal.working_tic)
    dropout_fraction: float = field(
        default=0.1, metadata=_within(0, 1, low_open=True, high_open=True)
    )
    # shortest run of low scans that counts as a dropout
    dropout_min_scans: int = field(default=1, metadata=_within(1, 1_000_000))


@dataclass(frozen=True, slots=True, kw_only=True)
class Condition:
    """A condition on one value; exactly the fields that are set are tested (any one true fires).

    Fixed: ``above``, ``below``, ``outside`` [lo, hi], ``inside`` [lo, hi], ``is_`` (bool).
    Against a baseline: ``below_ratio``/``above_ratio`` (value / centre), ``diff_above``/
    ``diff_below``/``diff_outside`` (value - centre), ``z_above``/``z_below``/``z_outside``
    ((value - centre) / sd).
    """

    above: float | None = field(default=None, metadata=_magnitude())
    below: float | None = field(default=None, metadata=_magnitude())
    outside: tuple[float, float] | None = field(default=None, metadata=_magnitude())
    inside: tuple[float, float] | None = field(default=None, metadata=_magnitude())
    is_: bool | None = field(default=None, metadata=_key("is"))
    below_ratio: float | None = field(default=None, metadata=_positive(1e6))
    above_ratio: float | None = field(default=None, metadata=_positive(1e6))
    diff_above: float | None = field(default=None, metadata=_magnitude())
    diff_below: float | None = field(default=None, metadata=_magnitude())
    diff_outside: tuple[float, float] | None = field(default=None, metadata=_magnitude())
    z_above: float | None = field(default=None, metadata=_magnitude(1000.0))
    z_below: float | None = field(default=None, metadata=_magnitude(1000.0))
    z_outside: tuple[float, float] | None = field(default=None, metadata=_magnitude(1000.0))


@dataclass(frozen=True, slots=True, kw_only=True)
class BaselineSpec:
    """Where a check's centre and spread come from.

    Either the robust statistics of the last ``runs`` accepted runs of the same kind (median and
    1.4826 x MAD), needing at least ``min_runs``; or fixed ``mean`` and ``sd`` set by the lab.
    """

    # the history read per judgement grows with runs: beyond 10 000 it is an archive, not a baseline
    runs: int = field(default=20, metadata=_within(1, 10_000))
    min_runs: int = field(default=5, metadata=_within(1, 10_000))
    mean: float | None = field(default=None, metadata=_magnitude())
    sd: float | None = field(default=None, metadata=_positive(_MAX_MAGNITUDE))


@dataclass(frozen=True, slots=True, kw_only=True)
class EwmaSpec:
    # weight of the newest run
    lam: float = field(default=0.2, metadata=_key("lambda", Range(0, 1, low_open=True)))
    # control-limit width in sigma of the EWMA statistic
    L: float = field(default=3.0, metadata=_positive(10.0))


@dataclass(frozen=True, slots=True, kw_only=True)
class CusumSpec:
    k: float = field(default=0.5, metadata=_within(0, 10.0))  # allowance, in SD units
    h: float = field(default=5.0, metadata=_positive(100.0))  # decision interval, in SD units


@dataclass(frozen=True, slots=True, kw_only=True)
class ForecastSpec:
    # K: fit over the last K runs (this one included); a line through 2 points is no trend
    runs: int = field(default=10, metadata=_within(3, 10_000))
    # a finding when the critical limit is reached within this (a year at most)
    warn_within_h: float = field(default=12.0, metadata=_positive(366 * 24.0))
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
    # consecutive runs the condition must hold before it fires
    for_runs: int = field(default=1, metadata=_within(1, 1000))
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
            # Longer than a file name can be: never handed to the unbounded regex matcher.
            if len(file_name) > MAX_MATCHED_NAME_CHARS:
                continue
            if _compiled(pattern[len(REGEX_PREFIX) :]).fullmatch(file_name):
                return True
        elif fnmatchcase(file_name, pattern):
            return True
    return False


@functools.lru_cache(maxsize=256)
def _compiled(pattern: str) -> re.Pattern[str]:
    # Loaded configs have valid, safe regexes already; this guards checks built in code.
    from watcher.config.regexes import regex_problem

    try:
        compiled = re.compile(pattern)
    except re.error as exc:
        raise ConfigError(
            [ConfigProblem("", None, "applies_to", f"invalid regex {pattern!r}: {exc}")]
        ) from exc
    problem = regex_problem(pattern)
    if problem is not None:
        raise ConfigError([ConfigProblem("", None, "applies_to", problem)])
    return compiled


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
    remind_every_s: float | None = field(
        default=4 * 3600.0, metadata=_key("remind_every", Range(0, 30 * _DAY_S, low_open=True))
    )
    send_cleared: bool = True
    # the no-run alert; None = off
    expect_run_every_s: float | None = field(
        default=None, metadata=_key("expect_run_every", Range(0, 30 * _DAY_S, low_open=True))
    )
    # local (start, end), e.g. 18:00 to 08:00: the no-run alert watches only then (may wrap)
    active_hours: tuple[time, time] | None = None
    # whole notify() call; the delivery worker is blocked for this long at most
    timeout_s: float = field(default=30.0, metadata=_positive(_HOUR_S))
    connect_timeout_s: float = field(default=10.0, metadata=_positive(300.0))  # apprise cto
    read_timeout_s: float = field(default=10.0, metadata=_positive(300.0))  # apprise rto
    # give up on a message older than this
    retry_for_s: float = field(
        default=24 * 3600.0, metadata=_key("retry_for", Range(0, 30 * _DAY_S, low_open=True))
    )
    # Wait before the first retry of a failed delivery; it doubles per attempt up to the max.
    retry_first_wait_s: float = field(
        default=5.0, metadata=_key("retry_first_wait", Range(0, _DAY_S, low_open=True))
    )
    retry_max_wait_s: float = field(
        default=600.0, metadata=_key("retry_max_wait", Range(0, _DAY_S, low_open=True))
    )
    plots: bool = False  # attach a PNG of the metric history where the channel takes attachments


@dataclass(frozen=True, slots=True, kw_only=True)
class HealthLog:
    dir: Path | None = None  # default: <state_dir>/health
    keep_days: int = field(default=90, metadata=_within(1, 36_500))  # a century at most


@dataclass(frozen=True, slots=True, kw_only=True)
class Convert:
    """Vendor raw runs (files or folders) turned into mzML by the lab's own converter.

    The daemon runs ``command`` (no shell) with ``{input}`` replaced by the vendor run's path
    and ``{output_dir}`` by an empty folder under ``<state_dir>/converted``; the one run file
    it writes there is measured under the vendor run's name. The original is only read.
    """

    # File or folder names that are vendor runs, e.g. "*.d" (a folder), "*.raw" (a file).
    patterns: tuple[str, ...] = ()
    # argv: [program, arg, ...]; {input} and {output_dir} are the only placeholders.
    command: tuple[str, ...] = ()
    # A converter still running after this is killed (with its whole process group).
    timeout_s: float = field(default=1800.0, metadata=_positive(_DAY_S))


CONVERT_PLACEHOLDERS = ("{input}", "{output_dir}")


@dataclass(frozen=True, slots=True, kw_only=True)
class Limits:
    """Per-run measuring limits of the child process; both grow with file size."""

    parse_timeout_s: float = field(default=300.0, metadata=_positive(_DAY_S))
    parse_timeout_s_per_gb: float = field(default=300.0, metadata=_within(0, _DAY_S))
    # below 64 MB the interpreter and readers do not load; above 1 TB is no machine's RAM
    parse_memory_mb: int = field(default=2048, metadata=_within(64, 1024 * 1024))
    queue_max: int = field(default=10000, metadata=_within(1, 10_000_000))
    # Bound on a .mzML.gz's decompressed size: the largest real runs are a few GB inflated, a
    # gzip bomb is 1000 times its file size. Over it, the run is unreadable (kind "too-large").
    max_inflated_mb: int = field(default=20000, metadata=_within(1, 1024 * 1024 * 1024))
    # Processes that read one large indexed mzML in blocks (0: the cores, at most 4; 1: one
    # pass). The metrics are the same either way; only the wall time differs.
    workers: int = field(default=0, metadata=_within(0, 64))


@dataclass(frozen=True, slots=True, kw_only=True)
class Central:
    """The facility's PostgreSQL store every judged run, alert and message is also published to.

    Off without ``url``. The local SQLite store stays the daemon's own state: publishing goes
    through a queue in it, on a thread of its own, so judging and alerting never wait for it.
    """

    # postgresql://user@host:port/db; secret (a password through ${ENV}): never logged unmasked
    url: str | None = None
    # one connection attempt; a dead server costs the publishing thread this long, nothing else
    connect_timeout_s: float = field(default=5.0, metadata=_positive(300.0))
    # queue entries sent in one PostgreSQL transaction
    batch_max: int = field(default=500, metadata=_within(1, 100_000))
    # after a failed publish: this wait, doubling per failure, never more than retry_max_wait
    retry_first_wait_s: float = field(
        default=1.0, metadata=_key("retry_first_wait", Range(0, _DAY_S, low_open=True))
    )
    retry_max_wait_s: float = field(
        default=60.0, metadata=_key("retry_max_wait", Range(0, _DAY_S, low_open=True))
    )


# Kinds of events on the record (``ionwarden note --kind``); ``reset_baselines_on`` names some.
NOTE_KINDS = kinds.NOTE_KINDS

WEEKDAYS: tuple[str, ...] = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")  # date.weekday()


@dataclass(frozen=True, slots=True)
class Weekly:
    """A recurring local time window: on each of ``days`` from ``start`` to ``end``.

    ``end`` at or before ``start`` ends on the next day (``sat 23:00-03:00`` ends Sunday 03:00).
    """

    days: tuple[int, ...]  # 0 = Monday, as date.weekday()
    start: time
    end: time


@dataclass(frozen=True, slots=True, kw_only=True)
class PlannedWindow:
    """A planned quiet time: recurring (``every``) or one-off (``from`` .. ``until``).

    Times are the instrument's local wall-clock times. During a window the alerts of ``checks``
    (all when empty) reach no channel, as under ``ionwarden silence``, and the no-run alert is off.
    """

    every: Weekly | None = None
    from_at: datetime | None = field(default=None, metadata=_key("from"))  # naive: local time
    until_at: datetime | None = field(default=None, metadata=_key("until"))  # naive: local time
    reason: str = "maintenance"
    checks: tuple[str, ...] = ()
    line: int | None = field(default=None, metadata=_key(None))  # YAML line, for messages


# The port a listen address may name: 0 (the kernel picks) is no address to scrape or open.
PORT_RANGE = Range(1, 65535)
LOOPBACK_HOSTS = ("127.0.0.1", "::1", "localhost")


@dataclass(frozen=True, slots=True, kw_only=True)
class Listen:
    """A TCP address to serve on, written ``"HOST:PORT"`` in YAML (``"[::1]:9464"`` for IPv6)."""

    host: str
    port: int = field(metadata=_within(PORT_RANGE.low, PORT_RANGE.high))

    @property
    def is_loopback(self) -> bool:
        """Only this machine can connect: no token needed (watcher.view.app)."""
        return self.host in LOOPBACK_HOSTS or self.host.startswith("127.")

    def __str__(self) -> str:
        return f"[{self.host}]:{self.port}" if ":" in self.host else f"{self.host}:{self.port}"


@dataclass(frozen=True, slots=True, kw_only=True)
class MetricsConfig:
    """The Prometheus/OpenMetrics endpoint the daemon serves (watcher.view.metrics)."""

    listen: Listen | None = None  # None: off


@dataclass(frozen=True, slots=True, kw_only=True)
class Serve:
    """``ionwarden serve``: the read-only floor page (watcher.view.app)."""

    listen: Listen = field(default_factory=lambda: Listen(host="127.0.0.1", port=8470))
    # Required when listen is not a loopback address; never logged or shown (secret).
    token: str | None = None
    # how often the page asks whether a new run was judged (the JSON poll)
    refresh_s: float = field(default=3.0, metadata=_positive(_HOUR_S))


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
    central: Central = field(default_factory=Central)
    convert: Convert = field(default_factory=Convert)
    digest_at: time | None = None  # local time of day (YAML "07:30"): the daemon sends the digest
    log_keep_days: int = field(default=30, metadata=_within(1, 36_500))
    maintenance: tuple[PlannedWindow, ...] = ()
    # event kinds (NOTE_KINDS) whose note restarts baselines and trends, as --reset-baselines
    reset_baselines_on: tuple[str, ...] = ()
    metrics: MetricsConfig = field(default_factory=MetricsConfig)
    serve: Serve = field(default_factory=Serve)


WESTGARD_RULES: tuple[str, ...] = ("1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10x")
"""Westgard multi-rule names (Westgard, Barry, Hunt, Groth, Clin. Chem. 27 (1981) 493-501)."""


def metric_fields() -> dict[str, tuple[str, ...]]:
    """Metric group -> its value names, derived from the records that ``RunMetrics.flat()`` reads.

    ``signal`` keeps only scalar fields (``flat()`` skips tuples such as ``precursor_charges``);
    ``calibrant`` and ``expected_ion`` drop ``name``, which is a path segment, not a value.
    """
    from watcher.records import (
        CalibrantDrift,
        ExpectedIonResult,
        FileChecks,
        MassCorrection,
        SignalMetrics,
    )

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
        "file": scalars(FileChecks),
    }


def is_yes_no_metric(metric: str) -> bool:
    """Whether ``metric`` names a true/false value (e.g. ``expected_ion.caffeine.found``).

    Derived from the records' field types, like ``metric_fields``: yes/no values can be tested
    with ``is:`` but have no mean, SD or trend.
    """
    from watcher.records import CalibrantDrift, ExpectedIonResult, FileChecks, SignalMetrics

    group, _, rest = metric.partition(".")
    name = rest.rsplit(".", 1)[-1]
    records: dict[str, type] = {
        "file": FileChecks,
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
    for group in ("signal", "expected_ions", "mass_correction", "file"):
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
        "expected_ion.<name|*>.<value>, expected_ions.<value>, mass_correction.<value> "
        "or file.<value>"
    )


def state_dir_of(config: Config) -> Path:
    """The state folder: ``state_dir`` from the config, else ``state/`` beside the config file."""
    if config.state_dir is not None:
        return Path(config.state_dir)
    base = config.source.parent if config.source is not None else Path.cwd()
    return base / "state"
