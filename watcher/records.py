"""Frozen records passed between the stages: a run file, its metrics, findings, verdicts and alerts.

Records hold scalars only (arrays stay inside ``watcher.measure``), so every record is hashable,
comparable and cheap to serialise. ``RunMetrics.flat()`` is the single definition of the metric
paths that checks, the store and the health log use, e.g. ``calibrant.siloxane-445.median_ppm``.
"""

from __future__ import annotations

import dataclasses
import os
import re
from dataclasses import dataclass
from datetime import UTC, datetime
from enum import StrEnum
from pathlib import Path
from typing import Any


class Status(StrEnum):
    """A run's status: the highest finding severity, or ``unreadable`` when it was not measured."""

    OK = "ok"
    NOTICE = "notice"
    WARNING = "warning"
    CRITICAL = "critical"
    UNREADABLE = "unreadable"

    @property
    def accepted(self) -> bool:
        """Whether a run of this status may enter a baseline: ok or notice (a notice is a heads-up,
        not a rejection). The one definition the rules, the digest and ``check`` share."""
        return self in (Status.OK, Status.NOTICE)


class Severity(StrEnum):
    """Finding severities, in the words of syslog (RFC 5424)."""

    NOTICE = "notice"
    WARNING = "warning"
    CRITICAL = "critical"

    @property
    def rank(self) -> int:
        """1 (notice) < 2 (warning) < 3 (critical), for comparisons."""
        return _SEVERITY_RANK[self]


_SEVERITY_RANK = {Severity.NOTICE: 1, Severity.WARNING: 2, Severity.CRITICAL: 3}

STATUS_RANK: dict[Status, int] = {
    Status.OK: 0,
    Status.NOTICE: 1,
    Status.WARNING: 2,
    Status.CRITICAL: 3,
    Status.UNREADABLE: 3,
}


@dataclass(frozen=True, slots=True, kw_only=True)
class RunFile:
    """One exported run file as intake saw it. ``sha256`` is None until the file was hashed."""

    path: Path
    size: int
    mtime_ns: int
    sha256: str | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class SignalMetrics:
    """Signal strength and acquisition shape of one run, from MS1/MS2 headers and arrays.

    A targeted run without spectra (SRM/MRM chromatograms only) has no MS1 scans: its
    ``rt_*``, ``tic_median``, ``dropouts``, ``longest_dropout_s`` and ``tic_rt*`` come from its
    TIC chromatogram (or the sum of its transitions), one point per acquisition cycle; the values
    of spectra alone (base peak, injection times, MS1 cycle, charges) stay None.
    """

    ms1_count: int
    ms2_count: int
    rt_start_s: float | None
    rt_end_s: float | None
    tic_median: float | None  # MS1 only
    bpi_median: float | None  # MS1 base peak intensity
    dropouts: int | None  # runs of MS1 scans with TIC < dropout_fraction x run median
    longest_dropout_s: float | None
    ms1_injection_time_ms_median: float | None = None
    ms2_injection_time_ms_median: float | None = None
    cycle_time_s_median: float | None = None  # MS1 -> next MS1
    tic_rt25_s: float | None = None  # RT by which 25 % of the MS1 TIC has eluted
    tic_rt50_s: float | None = None
    tic_rt75_s: float | None = None
    precursor_charges: tuple[tuple[int, int], ...] = ()  # (charge, MS2 count), charge 0 = unknown


@dataclass(frozen=True, slots=True, kw_only=True)
class CalibrantDrift:
    """Mass error of one calibrant (lock mass) over a run's MS1 scans. None where never found."""

    name: str
    mz: float  # theoretical
    median_ppm: float | None
    mad_ppm: float | None  # median absolute deviation, unscaled
    p05_ppm: float | None
    p95_ppm: float | None
    found_fraction: float  # share of MS1 scans in which the calibrant was found
    median_intensity: float | None
    slope_ppm_per_h: float | None  # Theil-Sen slope of ppm against RT
    scans_found: int = 0


@dataclass(frozen=True, slots=True, kw_only=True)
class MassCorrection:
    """Linear fit of mass error against m/z over two or more calibrants: ppm = a + b * mz.

    This is the error line; a correction subtracts it (the opposite sign). Never applied.
    """

    intercept_ppm: float
    slope_ppm_per_mz: float
    calibrants_used: int


@dataclass(frozen=True, slots=True, kw_only=True)
class FileChecks:
    """What the file says about itself, apart from its spectra (metric paths ``file.<key>``)."""

    # The indexedmzML SHA-1 fileChecksum against the bytes; None when the file carries none.
    # A mismatch means the file changed after it was written (a patching tool, a transfer
    # that converted line ends, damage): the run is measured and a check decides.
    checksum_ok: bool | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class ExpectedIonResult:
    """Presence of one expected ion: its XIC apex over MS1 within the RT window."""

    name: str
    mz: float
    # None: not searchable in this run (no MS1 spectra, e.g. MGF, MS1 without peak arrays, or
    # no MS1 scan of the ion's polarity); RunMetrics.notes says why. An RT window outside the
    # run is searched and not found.
    found: bool | None
    apex_rt_s: float | None
    apex_intensity: float | None
    ppm: float | None  # mass error at the apex
    fwhm_s: float | None
    m1_ratio: float | None  # observed (M+1)/M at the apex
    m1_ratio_expected: float | None  # from the elemental composition; None for bare m/z ions
    # Transitions (an expected ion with product_mz, found in the chromatograms) only:
    area: float | None = None  # intensity x s under the peak, between its 1 %-of-apex crossings
    ion_ratio: float | None = None  # this transition's area / the area of its ratio_to transition
    ion_ratio_deviation_pct: float | None = None  # (ion_ratio / expected_ratio - 1) x 100


@dataclass(frozen=True, slots=True, kw_only=True)
class RunMetrics:
    """Everything measured on one run. ``notes`` explain nulls (e.g. an MGF file has no MS1)."""

    file: str
    format: str  # mzML, mzML.gz, mzXML, MGF
    acquired_at: datetime | None  # from the file (run startTimeStamp); None when absent
    signal: SignalMetrics
    calibrants: tuple[CalibrantDrift, ...] = ()
    mass_correction: MassCorrection | None = None
    expected_ions: tuple[ExpectedIonResult, ...] = ()
    notes: tuple[str, ...] = ()
    file_checks: FileChecks = FileChecks()

    def flat(self) -> dict[str, float | bool | None]:
        """Metric path -> value, the names that checks refer to.

        ``signal.<key>``, ``calibrant.<name>.<key>``, ``expected_ion.<name>.<key>``,
        ``expected_ions.found_fraction``, ``mass_correction.<key>``, ``file.<key>``.
        """
        out: dict[str, float | bool | None] = {}
        for f in dataclasses.fields(FileChecks):
            out[f"file.{f.name}"] = getattr(self.file_checks, f.name)
        for f in dataclasses.fields(SignalMetrics):
            value = getattr(self.signal, f.name)
            if isinstance(value, int | float | bool) or value is None:
                out[f"signal.{f.name}"] = value
        for cal in self.calibrants:
            for f in dataclasses.fields(CalibrantDrift):
                if f.name != "name":
                    out[f"calibrant.{cal.name}.{f.name}"] = getattr(cal, f.name)
        for ion in self.expected_ions:
            for f in dataclasses.fields(ExpectedIonResult):
                if f.name != "name":
                    out[f"expected_ion.{ion.name}.{f.name}"] = getattr(ion, f.name)
        searched = [ion for ion in self.expected_ions if ion.found is not None]
        if searched:
            n_found = sum(1 for ion in searched if ion.found)
            out["expected_ions.found_fraction"] = n_found / len(searched)
            out["expected_ions.missing_count"] = float(len(searched) - n_found)
        elif self.expected_ions:
            out["expected_ions.found_fraction"] = None
            out["expected_ions.missing_count"] = None
        if self.mass_correction is not None:
            out["mass_correction.intercept_ppm"] = self.mass_correction.intercept_ppm
            out["mass_correction.slope_ppm_per_mz"] = self.mass_correction.slope_ppm_per_mz
        return out

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready nested dict (datetimes as ISO-8601 strings)."""
        out: dict[str, Any] = _jsonable(dataclasses.asdict(self))
        return out


@dataclass(frozen=True, slots=True, kw_only=True)
class HistoryPoint:
    """One earlier run's value of one metric, as the store hands it to the rules."""

    file_name: str
    acquired_at: datetime
    value: float | bool | None
    status: Status


@dataclass(frozen=True, slots=True, kw_only=True)
class Finding:
    """A check that fired on a run.

    Attributes:
        check: the check's name from the config.
        severity: notice, warning or critical.
        metric: the metric path the check watches (a concrete one when the check used ``*``).
        subject: what the finding is about, for alert identity (the metric path, or the check).
        message: one sentence for a person on a phone: what, how far off, what it means.
        value: the measured value (None when missing).
        limit: the limit crossed, as text (``outside [-3, 3]``, ``below 0.3 x baseline``).
        rule: the rule that fired (``limit``, ``2-2s``, ``ewma``, ``cusum``, ``forecast``, ...).
        baseline: the baseline used, as text, or None.
        forecast_h: hours until the critical limit is crossed at the current rate, if known.
    """

    check: str
    severity: Severity
    metric: str
    subject: str
    message: str
    value: float | bool | None
    limit: str
    rule: str = "limit"
    baseline: str | None = None
    forecast_h: float | None = None

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = _jsonable(dataclasses.asdict(self))
        return out


@dataclass(frozen=True, slots=True, kw_only=True)
class Verdict:
    """The judged outcome of one run: its status, why, and what was measured (None: unreadable)."""

    run_file: RunFile
    status: Status
    # When the run was made: the acquisition time the file states, else the file's modification
    # time (an unreadable file, an mzXML or MGF export without a start time). ``run_time``.
    acquired_at: datetime
    error: str | None = None  # one line; set when status is unreadable
    error_kind: str | None = None
    metrics: RunMetrics | None = None
    findings: tuple[Finding, ...] = ()
    # The (check, subject) pairs the rules evaluated on this run (``Judgement.evaluated``): only
    # these may clear an open alert. Empty for an unreadable run.
    evaluated: frozenset[tuple[str, str]] = frozenset()
    trend_states: tuple[TrendState, ...] = ()  # stored with the run, continued by the next
    judged_at: datetime | None = None

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = _jsonable(dataclasses.asdict(self))
        out["evaluated"] = sorted([list(pair) for pair in self.evaluated])
        out.pop("trend_states", None)  # the rules' working state, kept in the store only
        return out


def run_time(metrics: RunMetrics | None, run_file: RunFile, judged_at: datetime) -> datetime:
    """A run's place in time: the acquisition time its file states, else the file's modification
    time (when the instrument's export wrote it, which a person matches against the queue), else
    the judgement time for a file that could not even be looked at. The one definition the
    daemon, ``check``, the store, the alerts and the digest share."""
    if metrics is not None and metrics.acquired_at is not None:
        return metrics.acquired_at
    if run_file.mtime_ns > 0:
        return datetime.fromtimestamp(run_file.mtime_ns / 1e9, UTC)
    return judged_at


_SHORT_ESCAPES = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}


def _escape(ch: str) -> str:
    code = ord(ch)
    if ch in _SHORT_ESCAPES:
        return _SHORT_ESCAPES[ch]
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


# C0 and C1 controls, DEL, and the Unicode line breaks and direction overrides that rearrange
# or split what a terminal or a line protocol shows.
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029\u200e\u200f\u202a-\u202e\u2066-\u2069]")


def printable(text: str) -> str:
    """``text`` with every control character shown as its escape (newline as ``\\n``, ESC as
    ``\\x1b``), so that it stays one line of plain characters.

    Run files are named by whoever exports them: a name holding a newline and ``WATCHDOG=1``
    would become a second sd_notify command, and one holding ESC sequences would drive the
    terminal that ``check`` or ``status`` prints to. Every text from outside (file names,
    reasons, finding messages) passes through this before a log line, a terminal, a
    notify datagram or an alert. Backslashes are kept as they are: a name is still recognisable.
    """
    if _CONTROL.search(text) is None:
        return text
    return _CONTROL.sub(lambda m: _escape(m.group()), text)


@dataclass(frozen=True, slots=True, kw_only=True)
class ReadFailure:
    """Why a run file gave no metrics (``watcher.measure.run.measure_or_failure``).

    Attributes:
        kind: short machine-readable reason (``truncated``, ``corrupt``, ``memory``, ...; the
            kinds of ``watcher.errors.ReadError``).
        reason: one line for a person: no traceback, no directory names, at most 240 characters.
    """

    kind: str
    reason: str


@dataclass(frozen=True, slots=True, kw_only=True)
class TrendState:
    """The EWMA and CUSUM statistics of one (check, metric path) after one run, carried to the
    next run so that they span the whole history, not a window of it.

    Attributes:
        check: the check's name.
        path: the concrete metric path.
        spec: the check's EWMA/CUSUM/baseline settings as text; a state made under other settings
            is not continued (the statistics restart from a window of recent runs).
        n_runs: runs the statistics have seen (for the EWMA limits' start-up factor).
        ewma: the EWMA statistic, or None without an EWMA rule.
        cusum_hi: the upper tabular CUSUM sum (SD units), or None without a CUSUM rule.
        cusum_lo: the lower sum.
    """

    check: str
    path: str
    spec: str
    n_runs: int
    ewma: float | None = None
    cusum_hi: float | None = None
    cusum_lo: float | None = None


@dataclass(frozen=True, slots=True, kw_only=True)
class Judgement:
    """What the rules made of one run's metrics (``watcher.rules.judge``), for the Verdict.

    Attributes:
        status: the highest finding severity, ``ok`` without findings.
        findings: the checks that fired, in config order.
        evaluated: every (check name, subject) pair that was judged, whether it fired or not.
            A check whose metrics are all null on this run (no calibrant measured in an MGF
            file) has no pair: that run says nothing about it and must not clear its alert.
    """

    status: Status
    findings: tuple[Finding, ...]
    evaluated: frozenset[tuple[str, str]]
    trend_states: tuple[TrendState, ...] = ()


class DaemonEvent(StrEnum):
    """Daemon events: health-log ``kind`` values, and the ones the notifier turns into messages."""

    STARTED = "daemon.started"
    STOPPED = "daemon.stopped"
    CONFIG_REJECTED = "config.rejected"  # a reload that failed validation: a warning message
    NORUN_MISSED = "heartbeat.missed"  # no run arrived in time: raises the no-run alert
    NORUN_RESUMED = "heartbeat.resumed"  # runs arrive again: clears it
    STORE_UNWRITABLE = "store.unwritable"  # the state database refuses writes (full disk...)
    STORE_RECOVERED = "store.recovered"  # it takes writes again: an info message via the outbox
    DUPLICATE = "run.duplicate"  # a copy of a run already judged arrived: no alert, a line


class AlertAction(StrEnum):
    """What the alert state machine decided for one alert key."""

    RAISE = "raise"
    ESCALATE = "escalate"
    REMIND = "remind"
    CLEAR = "clear"


@dataclass(frozen=True, slots=True, kw_only=True)
class AlertState:
    """An open alert as last told to one channel (stepped by ``watcher.notify.alert_state``).

    Attributes:
        severity: the highest severity sent since the alert was raised (escalation compares to it).
        raised_at_s: epoch seconds of the raise.
        last_sent_at_s: epoch seconds of the last raise, escalation or reminder sent.
        finding: the latest finding behind the alert (reminders repeat its value).
        acked_at_s: epoch seconds of a person's acknowledgement at ``severity``; None: not
            acknowledged. An escalation drops it (the worse state is news again).
    """

    severity: Severity
    raised_at_s: float
    last_sent_at_s: float
    finding: Finding
    acked_at_s: float | None = None


def _jsonable(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, datetime):
        return value.isoformat()
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, StrEnum):
        return str(value)
    if isinstance(value, float) and value != value:  # NaN is not JSON
        return None
    return value


def shown(text: str | Path) -> str:
    """A file name, path or message as text any log line, JSON, alert or terminal can carry.

    Names that are not valid UTF-8 (common on shares written by other systems) reach Python with
    the undecodable bytes as surrogates (``os.fsdecode``); written as ``\\xNN`` here, so that
    ``latin1_\\xe9.mzML`` shows which byte it was, and encoding to UTF-8 never fails. Control
    characters are escaped as well (``printable``): one function for every outside text.
    """
    return printable(os.fsencode(str(text)).decode("utf-8", "backslashreplace"))
