"""The daily digest: one day's runs, findings and charts, as a terminal summary and an HTML page.

``build_digest`` reads the run history (``watcher.store.history.runs_between``) and draws the
charts; ``render_text`` and ``render_html`` only format. The HTML is self-contained: inline CSS,
charts as base64 ``data:`` PNGs, no scripts and no external resources, so it can be mailed,
attached or opened from a USB stick.
"""

from __future__ import annotations

import base64
import html
import statistics
from collections import Counter
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, time, timedelta
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

from watcher.config import BaselineSpec, Check, Config
from watcher.notify import digest_controls, plots
from watcher.notify.alert_text import limit_words, subject_words, value_words
from watcher.records import STATUS_RANK, Status
from watcher.rules.baseline import Baseline, from_spec
from watcher.rules.checks import critical_bounds, matches_metric
from watcher.store import history

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Mapping, Sequence

    from watcher.store.history import RunRow

_BASELINE_LOOKBACK = timedelta(days=30)


@dataclass(frozen=True, slots=True, kw_only=True)
class Chart:
    title: str
    png: bytes
    kind: str  # levey-jennings, tic, ion-intensity, ion-rt, status


@dataclass(frozen=True, slots=True, kw_only=True)
class FindingRow:
    time: str  # local HH:MM
    file: str
    check: str
    subject: str  # the calibrant, ion or signal the finding is about (from its metric path)
    severity: str
    value: str
    limit: str
    rule: str
    message: str
    silenced: bool = False  # judged while a silence or maintenance window held its alert back


@dataclass(frozen=True, slots=True, kw_only=True)
class CalibrantSummary:
    name: str
    runs: int
    mean_ppm: float | None
    min_ppm: float | None
    max_ppm: float | None
    baseline: str  # where the chart's centre and SD come from
    covers: str = "all runs"  # which runs the row and its chart hold (the check's applies_to)
    centre_ppm: float | None = None  # the rules' baseline centre at the start of the day
    sd_ppm: float | None = None  # and its spread; None when the rules had no baseline yet


@dataclass(frozen=True, slots=True, kw_only=True)
class OpenProblem:
    """An alert still open when the digest was made: what, how bad, since when, which run."""

    check: str
    subject: str
    severity: str
    value: str
    since: str  # local "YYYY-MM-DD HH:MM"
    run_file: str | None
    acked: str | None = None  # "acknowledged by NAME at HH:MM", while it stays at that severity


@dataclass(frozen=True, slots=True, kw_only=True)
class ReviewRun:
    """A run of the day that needs a decision: critical, warning or unreadable."""

    time: str
    file: str
    status: str
    why: str


@dataclass(frozen=True, slots=True, kw_only=True)
class Digest:
    day: date
    instrument: str
    timezone: str
    run_count: int
    by_status: Mapping[str, int]
    calibrants: tuple[CalibrantSummary, ...]
    findings: tuple[FindingRow, ...]
    unreadable: tuple[tuple[str, str], ...]  # (file, error)
    charts: tuple[Chart, ...]
    worst: str = "ok"  # the worst run status of the day ("none" without runs)
    open_problems: tuple[OpenProblem, ...] = ()
    to_review: tuple[ReviewRun, ...] = ()
    controls: digest_controls.DayControls = field(default_factory=digest_controls.DayControls)


# -- reading the history ----------------------------------------------------------------------


def _value(run: RunRow, metric: str) -> float | None:
    value = run.metrics.get(metric)
    if isinstance(value, bool) or not isinstance(value, int | float) or value != value:
        return None
    return float(value)


_UNIT_SUFFIXES = (
    ("_ppm_per_h", "ppm/h"),
    ("_ppm_per_mz", "ppm per m/z"),
    ("_ppm", "ppm"),
    ("_s", "s"),
    ("_fraction", ""),
    ("_count", ""),
)


def unit_of(metric: object) -> str:
    """The unit a metric path names in its last part (``median_ppm`` -> ``ppm``); "" if none."""
    last = str(metric or "").rsplit(".", 1)[-1]
    for suffix, unit in _UNIT_SUFFIXES:
        if last.endswith(suffix):
            return unit
    return ""


def with_unit(text: str, metric: object) -> str:
    """``6`` -> ``6 ppm`` for a ppm metric; text without a number, or unitless, as it came."""
    unit = unit_of(metric)
    if not unit or not text or not any(c.isdigit() for c in text) or text.endswith(unit):
        return text
    return f"{text} {unit}"


def day_bounds(day: date, timezone: str) -> tuple[datetime, datetime]:
    """Start and end (exclusive) of a local day, as aware UTC datetimes (DST days are 23/25 h)."""
    tz = ZoneInfo(timezone)
    start = datetime.combine(day, time(0), tz)
    end = datetime.combine(day + timedelta(days=1), time(0), tz)
    return start.astimezone(UTC), end.astimezone(UTC)


def _check_for(config: Config, metric: str) -> Check | None:
    """The check whose baseline a chart of ``metric`` should show.

    A lab-set mean and SD (the Westgard rules' target) win over a check that only sets limits,
    so the chart's lines are the ones the rules judged against. Metric patterns match as the
    rules expand them (``watcher.rules.checks.matches_metric``).
    """
    matching = [c for c in config.checks if matches_metric(c.metric, metric)]
    for check in matching:
        if check.baseline.mean is not None and check.baseline.sd is not None:
            return check
    for check in matching:
        if check.against == "baseline" or check.westgard:
            return check
    return matching[0] if matching else None


def _applies(check: Check | None, run: RunRow) -> bool:
    return check is None or check.applies_to_file(run.file_name)


def _baseline(
    check: Check | None, metric: str, earlier_runs: Sequence[RunRow]
) -> tuple[Baseline | None, str]:
    """The rules' own baseline for ``metric`` as it stood before ``earlier_runs`` ended.

    ``watcher.rules.baseline.from_spec`` on the check's spec: the lab's mean/SD, else median and
    1.4826 x MAD of the last ``runs`` accepted runs of the same kind, needing ``min_runs`` of
    them. A chart without a check uses the default spec. Returns the baseline (None: the rules
    had none either) and a line saying where it came from.
    """
    spec = check.baseline if check is not None else BaselineSpec()
    accepted = [
        v
        for run in earlier_runs
        if run.status.accepted and _applies(check, run) and (v := _value(run, metric)) is not None
    ]
    baseline = from_spec(spec, accepted)
    if baseline is None:
        return None, (
            f"none yet: {len(accepted[-spec.runs :])} accepted runs before the day, "
            f"{spec.min_runs} needed"
        )
    if baseline.is_fixed:
        name = check.name if check is not None else "?"
        return baseline, f"fixed by check '{name}'"
    return baseline, (
        f"median and 1.4826 MAD of the last {baseline.n_runs} accepted runs before the day"
    )


# -- building: collect, summarise, draw -------------------------------------------------------


@dataclass(frozen=True, slots=True, kw_only=True)
class _DayRuns:
    """The runs of one local day and of the lookback before it, each oldest first."""

    runs: list[RunRow]
    earlier: list[RunRow]


def _collect(conn: sqlite3.Connection, config: Config, day: date) -> _DayRuns:
    start, end = day_bounds(day, config.instrument.timezone)
    # The store's acquired_at is the acquisition time, else the file's mtime (one definition,
    # ``watcher.store.history.record_verdict``), so every run has a place on the time axis.
    return _DayRuns(
        runs=history.runs_between(conn, start, end),
        earlier=history.runs_between(conn, start - _BASELINE_LOOKBACK, start),
    )


def _finding_rows(
    runs: Sequence[RunRow],
    tz: ZoneInfo,
    day_controls: digest_controls.DayControls | None = None,
) -> list[FindingRow]:
    rows: list[FindingRow] = []
    for run in runs:
        judged_s = run.judged_at.timestamp()
        when = run.acquired_at.astimezone(tz).strftime("%H:%M")
        for f in run.findings:
            rows.append(
                FindingRow(
                    time=when,
                    file=run.file_name,
                    check=f.check,
                    subject=subject_words(f.metric),
                    severity=str(f.severity),
                    # the alerts' words: +6.2 ppm, 1.2 M, not found (alert_text.value_words)
                    value=value_words(f.metric, f.value),
                    limit=with_unit(f.limit, f.metric),
                    rule=f.rule,
                    message=f.message,
                    silenced=day_controls is not None
                    and day_controls.silenced(f.check, f.subject, judged_s),
                )
            )
    return rows


def _metric_state(run: RunRow, metric: str) -> str:
    """This metric's own state in ``run``: its worst finding's severity, else ``ok`` (the run's
    overall status could come from another metric and would mislead on this chart)."""
    severities = [f.severity for f in run.findings if f.metric == metric]
    worst = max(severities, key=lambda v: v.rank, default=None)
    return "ok" if worst is None else str(worst)


def _points(
    runs: Sequence[RunRow], metric: str, check: Check | None
) -> list[tuple[datetime, float, str]]:
    """(acquired at, value, this metric's state) of the runs of the check's kind with a value."""
    return [
        (r.acquired_at, v, _metric_state(r, metric))
        for r in runs
        if _applies(check, r) and (v := _value(r, metric)) is not None
    ]


def _limits(check: Check | None) -> list[tuple[float, str]]:
    """The check's fixed warning and critical bounds (``above``/``below``/``outside``)."""
    if check is None:
        return []
    out: list[tuple[float, str]] = []
    for level, condition in (("warning", check.warning), ("critical", check.critical)):
        upper, lower = critical_bounds(condition)
        out.extend((v, level) for v in (upper, lower) if v is not None)
    return out


def _covers(check: Check | None) -> str:
    if check is None or not check.applies_to:
        return "all runs"
    return "runs " + ", ".join(check.applies_to)


def _summarise_calibrant(
    name: str,
    points: Sequence[tuple[datetime, float, str]],
    baseline: Baseline | None,
    source: str,
    covers: str,
) -> CalibrantSummary:
    values = [p[1] for p in points]
    return CalibrantSummary(
        name=name,
        runs=len(values),
        mean_ppm=statistics.fmean(values) if values else None,
        min_ppm=min(values) if values else None,
        max_ppm=max(values) if values else None,
        baseline=source,
        centre_ppm=baseline.centre if baseline is not None else None,
        sd_ppm=baseline.sd if baseline is not None else None,
        covers=covers,
    )


def _levey_jennings(
    points: Sequence[tuple[datetime, float, str]],
    baseline: Baseline | None,
    tz: ZoneInfo,
    *,
    title: str,
    ylabel: str = "median mass error (ppm)",
    limits: Sequence[tuple[float, str]] = (),
    marks: Sequence[plots.Mark] = (),
) -> bytes:
    return plots.levey_jennings(
        [(p[0].astimezone(tz), p[1]) for p in points],
        marks=marks,
        limits=limits,
        mean=baseline.centre if baseline is not None else None,
        sd=baseline.sd if baseline is not None and baseline.sd > 0 else None,
        title=title,
        ylabel=ylabel,
        statuses=[p[2] for p in points],
    )


def _line(
    runs: Sequence[RunRow], metric: str, tz: ZoneInfo, scale: float = 1.0
) -> list[plots.Point]:
    return [
        (r.acquired_at.astimezone(tz), v * scale)
        for r in runs
        if (v := _value(r, metric)) is not None
    ]


def _not_found(runs: Sequence[RunRow], name: str, tz: ZoneInfo) -> list[datetime]:
    """Runs where the expected ion was looked for and not found (``found`` false)."""
    return [
        r.acquired_at.astimezone(tz)
        for r in runs
        if r.metrics.get(f"expected_ion.{name}.found") is False
    ]


def _found_line(
    runs: Sequence[RunRow], name: str, field: str, tz: ZoneInfo, scale: float = 1.0
) -> list[plots.Point]:
    """The ion's values in the runs where it was found; a missing run is a gap, not a value."""
    return [
        (r.acquired_at.astimezone(tz), v * scale)
        for r in runs
        if r.metrics.get(f"expected_ion.{name}.found") is not False
        and (v := _value(r, f"expected_ion.{name}.{field}")) is not None
    ]


def _run_charts(
    config: Config, runs: Sequence[RunRow], tz: ZoneInfo, marks: Sequence[plots.Mark] = ()
) -> list[Chart]:
    """TIC, expected-ion intensity and RT, and the status timeline of the day; every chart
    carries the day's events on the record as labelled vertical marks."""
    charts = [
        Chart(
            title="TIC (median MS1 total ion current) per run",
            png=plots.series(
                {"TIC median": _line(runs, "signal.tic_median", tz)},
                title="TIC",
                ylabel="TIC (counts)",
                log_y=True,
                marks=marks,
            ),
            kind="tic",
        )
    ]
    if config.expected_ions:
        names = [e.ion.name for e in config.expected_ions]
        missing = {n: _not_found(runs, n, tz) for n in names}
        intensity = {n: _found_line(runs, n, "apex_intensity", tz) for n in names}
        apex_rt_min = {n: _found_line(runs, n, "apex_rt_s", tz, 1 / 60.0) for n in names}
        charts.append(
            Chart(
                title="Expected ions: apex intensity per run (x: not found)",
                png=plots.series(
                    intensity,
                    title="apex intensity",
                    ylabel="apex intensity (counts)",
                    log_y=True,
                    missing=missing,
                    marks=marks,
                ),
                kind="ion-intensity",
            )
        )
        charts.append(
            Chart(
                title="Expected ions: apex retention time per run (x: not found)",
                png=plots.series(
                    apex_rt_min,
                    title="apex RT",
                    ylabel="apex RT (min)",
                    missing=missing,
                    marks=marks,
                ),
                kind="ion-rt",
            )
        )
    timeline = [(r.acquired_at.astimezone(tz), str(r.status)) for r in runs]
    charts.append(
        Chart(
            title="Run status over the day",
            png=plots.status_timeline(
                timeline, title="status", names=[r.file_name for r in runs], marks=marks
            ),
            kind="status",
        )
    )
    return charts


def _open_problems(
    conn: sqlite3.Connection, config: Config, tz: ZoneInfo
) -> tuple[OpenProblem, ...]:
    """The alerts open now, one per (check, subject) however many channels hold it."""
    from watcher.store import controls, outbox

    seen: dict[tuple[str, str], OpenProblem] = {}
    acks = controls.acks(conn, instrument=config.instrument.name)
    for alert in outbox.load_alerts(conn, instrument=config.instrument.name):
        key = (alert.check, alert.subject)
        finding = alert.state.finding
        since = datetime.fromtimestamp(alert.state.raised_at_s, tz).strftime("%Y-%m-%d %H:%M")
        ack = controls.ack_of(acks, alert.check, alert.subject, alert.state.raised_at_s)
        acked = (
            f"acknowledged by {ack.by} at "
            f"{datetime.fromtimestamp(ack.at_s, tz).strftime('%Y-%m-%d %H:%M')}"
            if ack is not None and alert.state.acked_at_s is not None
            else None
        )
        problem = OpenProblem(
            check=alert.check,
            subject=subject_words(alert.subject),
            severity=str(alert.state.severity),
            value=value_words(finding.metric, finding.value),
            since=since,
            run_file=alert.run_file,
            acked=acked,
        )
        if key not in seen or problem.since < seen[key].since:
            seen[key] = problem
    return tuple(seen.values())


_REVIEW = (Status.CRITICAL, Status.UNREADABLE, Status.WARNING)


def _to_review(runs: Sequence[RunRow], tz: ZoneInfo) -> tuple[ReviewRun, ...]:
    """The day's runs a person must decide on, worst first, then by time."""
    rows = []
    for r in runs:
        if r.status not in _REVIEW:
            continue
        if r.status is Status.UNREADABLE:
            why = r.error or "unreadable"
        else:
            worst = max(r.findings, key=lambda f: f.severity.rank, default=None)
            if worst is None:
                why = str(r.status)
            else:
                # the alert line's words: check, subject, value, limit (none for a yes/no check)
                limit = limit_words(worst)
                why = (
                    f"{worst.check}, {subject_words(worst.metric)}: "
                    f"{value_words(worst.metric, worst.value)}" + (f" ({limit})" if limit else "")
                )
        rows.append((r, why))
    rows.sort(key=lambda x: (_REVIEW.index(x[0].status), x[0].acquired_at))
    return tuple(
        ReviewRun(
            time=r.acquired_at.astimezone(tz).strftime("%H:%M"),
            file=r.file_name,
            status=str(r.status),
            why=why,
        )
        for r, why in rows
    )


def build_digest(conn: sqlite3.Connection, config: Config, day: date) -> Digest:
    """Collect one local day of runs, summarise them and draw their charts.

    A day without runs has no charts (the page says so in one line). The verdict at the top is
    the worst status of the day's runs, the alerts open now and the runs that need a decision.

    Args:
        conn: the state database (read only is enough).
        config: the lab config (instrument, calibrants, expected ions, checks).
        day: the day in the instrument's time zone.
    """
    from watcher.store import controls

    tz = ZoneInfo(config.instrument.timezone)
    day_runs = _collect(conn, config, day)
    runs = day_runs.runs
    start, end = day_bounds(day, config.instrument.timezone)
    day_controls = digest_controls.collect(
        conn, config, start, end, run_files={r.file_name for r in runs}
    )
    marks = day_controls.marks
    reset = controls.last_reset(conn, instrument=config.instrument.name, before=start)
    if reset is not None:  # the rules' baselines start again after the event, so do the charts'
        day_runs = _DayRuns(
            runs=runs, earlier=[r for r in day_runs.earlier if r.acquired_at >= reset]
        )
    charts: list[Chart] = []
    summaries: list[CalibrantSummary] = []
    for cal in config.calibrants:
        metric = f"calibrant.{cal.name}.median_ppm"
        check = _check_for(config, metric)
        points = _points(runs, metric, check)
        baseline, source = _baseline(check, metric, day_runs.earlier)
        summaries.append(_summarise_calibrant(cal.name, points, baseline, source, _covers(check)))
        title = f"{cal.name} (m/z {cal.mz:.4f})" if cal.mz else cal.name
        if runs:
            charts.append(
                Chart(
                    title=f"Levey-Jennings: {cal.name} median ppm, {_covers(check)} "
                    f"(baseline: {source})",
                    png=_levey_jennings(
                        points, baseline, tz, title=title, limits=_limits(check), marks=marks
                    ),
                    kind="levey-jennings",
                )
            )
    if runs:
        charts.extend(_run_charts(config, runs, tz, marks))
    worst = max((r.status for r in runs), key=lambda st: STATUS_RANK[st], default=None)
    return Digest(
        day=day,
        instrument=config.instrument.name,
        timezone=config.instrument.timezone,
        run_count=len(runs),
        by_status=dict(Counter(str(r.status) for r in runs)),
        calibrants=tuple(summaries),
        findings=tuple(_finding_rows(runs, tz, day_controls)),
        unreadable=tuple(
            (r.file_name, r.error or "unreadable") for r in runs if r.status is Status.UNREADABLE
        ),
        charts=tuple(charts),
        worst="none" if worst is None else str(worst),
        open_problems=_open_problems(conn, config, tz),
        to_review=_to_review(runs, tz),
        controls=day_controls,
    )


def metric_history_png(
    conn: sqlite3.Connection, config: Config, metric: str, *, end_s: float
) -> bytes | None:
    """A small chart of one metric over the last week's runs, for an alert attachment.

    The centre and SD lines are the rules' baseline for the newest run: from the runs before it.
    """
    end = datetime.fromtimestamp(end_s, UTC)
    runs = history.runs_between(conn, end - timedelta(days=7), end + timedelta(seconds=1))
    check = _check_for(config, metric)
    tz = ZoneInfo(config.instrument.timezone)
    points = _points(runs, metric, check)[-50:]
    if not points:
        return None
    baseline, _ = _baseline(check, metric, runs[:-1])
    return _levey_jennings(points, baseline, tz, title=metric, ylabel=metric.rsplit(".", 1)[-1])


# -- rendering --------------------------------------------------------------------------------

_STATUS_ORDER = ("ok", "notice", "warning", "critical", "unreadable")


def _counts(d: Digest) -> str:
    return ", ".join(f"{s} {d.by_status.get(s, 0)}" for s in _STATUS_ORDER)


def _ppm(v: float | None) -> str:
    return "n/a" if v is None else f"{v:+.2f}"


def verdict_line(d: Digest) -> str:
    """The night in one line: worst status, runs to decide on, alerts still open."""
    if d.run_count == 0:
        return f"No runs were recorded on {d.day.isoformat()}."
    parts = [f"worst run: {d.worst.upper()}"]
    parts.append(
        f"{len(d.to_review)} run(s) need a decision" if d.to_review else "no run needs a decision"
    )
    parts.append(
        f"{len(d.open_problems)} alert(s) still open" if d.open_problems else "no open alert"
    )
    return "; ".join(parts)


def render_text(d: Digest) -> str:
    """The terminal (and message body) summary: the verdict, then counts, drift, findings."""
    lines = [
        f"{d.instrument}: digest for {d.day.isoformat()} ({d.timezone})",
        verdict_line(d),
    ]
    if d.run_count == 0:
        return "\n".join(lines)
    for r in d.to_review:
        lines.append(f"  decide: {r.time} {r.file} {r.status}: {r.why}")
    for o in d.open_problems:
        acked = f", {o.acked}" if o.acked else ""
        lines.append(
            f"  open: {o.check}, {o.subject}: {o.value} ({o.severity} since {o.since}{acked})"
        )
    lines.extend(digest_controls.text_lines(d.controls))
    lines.append(f"runs: {d.run_count} ({_counts(d)})")
    for c in d.calibrants:
        lines.append(
            f"calibrant {c.name}: mean {_ppm(c.mean_ppm)} ppm, range {_ppm(c.min_ppm)} to "
            f"{_ppm(c.max_ppm)} ppm over {c.runs} {c.covers}"
        )
    lines.append(f"findings: {len(d.findings)}")
    for f in d.findings[:20]:
        lines.append(
            f"  {f.time} {f.file} {f.severity} {f.check}, {f.subject}: {f.value} "
            f"({f.limit}, {f.rule})" + (" [silenced]" if f.silenced else "")
        )
    if len(d.findings) > 20:
        lines.append(f"  ... and {len(d.findings) - 20} more (see the HTML page)")
    for file_name, error in d.unreadable:
        lines.append(f"unreadable: {file_name}: {error}")
    return "\n".join(lines)


_CSS = """
body{font-family:system-ui,sans-serif;margin:1em;color:#222;max-width:64em}
h1{font-size:1.35em}h2{font-size:1.1em;margin-top:1.6em}
.verdict{border:2px solid #999;border-radius:6px;padding:.6em .9em;margin:1em 0}
.verdict.critical,.verdict.unreadable{border-color:#c62828;background:#fdecea}
.verdict.warning{border-color:#a66f00;background:#fff8e1}
.verdict.ok,.verdict.notice{border-color:#2e7d32;background:#edf7ed}
.verdict p{margin:.3em 0}.verdict .headline{font-size:1.15em;font-weight:600}
table{border-collapse:collapse;font-size:.88em;width:100%;table-layout:auto}
td,th{border:1px solid #ccc;padding:.25em .45em;vertical-align:top;overflow-wrap:break-word}
th{background:#f3f3f3;text-align:left}.critical{color:#c62828}.warning{color:#a66f00}
.unreadable{color:#6a1b9a}figure{margin:1em 0}figcaption{font-size:.85em;color:#555}
img{max-width:100%;height:auto;border:1px solid #eee}td.num{white-space:nowrap}
.scroll{overflow-x:auto}
@media (max-width:600px){body{margin:.5em}
table,tbody,tr,td{display:block;width:auto}tr:first-child{display:none}
tr{border:1px solid #ccc;margin:.4em 0;padding:.2em .4em}td{border:0;padding:.1em 0}
td::before{content:attr(data-label) ": ";font-weight:600;color:#555}td.msg{display:none}}
"""


def _verdict_html(d: Digest) -> list[str]:
    e = html.escape
    out = [
        f'<section class="verdict {e(d.worst)}" id="verdict">',
        f'<p class="headline">{e(verdict_line(d))}</p>',
    ]
    if d.to_review:
        out.append("<p><strong>Runs that need a decision</strong></p><ul>")
        out.extend(
            f'<li class="{e(r.status)}">{e(r.time)} {e(r.file)}: {e(r.status)}, {e(r.why)}</li>'
            for r in d.to_review
        )
        out.append("</ul>")
    if d.open_problems:
        out.append("<p><strong>Still open</strong></p><ul>")
        out.extend(
            f'<li class="{e(o.severity)}">{e(o.check)}, {e(o.subject)}: {e(o.value)} '
            f"({e(o.severity)} since {e(o.since)}"
            + (f", {e(o.run_file)}" if o.run_file else "")
            + (f", {e(o.acked)}" if o.acked else "")
            + ")</li>"
            for o in d.open_problems
        )
        out.append("</ul>")
    out.append("</section>")
    return out


def render_html(d: Digest) -> str:
    """The self-contained HTML page (inline CSS, charts as data: URIs, no scripts).

    The verdict comes first; details follow. Tables stay within the page width (long words
    wrap; the message column is left out on a phone, it repeats the row's other cells).
    """
    e = html.escape
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{e(d.instrument)} digest {d.day.isoformat()}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<h1>{e(d.instrument)}: daily digest {d.day.isoformat()}</h1>",
        *_verdict_html(d),
    ]
    if d.run_count == 0:
        parts.append(
            "<p><small>An aid for the lab's own QC procedures, not a substitute for them."
            "</small></p></body></html>"
        )
        return "\n".join(parts)
    parts += [
        f"<p>Times in {e(d.timezone)}, by acquisition. Runs: <strong>{d.run_count}</strong> "
        f"({e(_counts(d))}).</p>",
        '<h2>Calibrants</h2><div class="scroll"><table><tr><th>calibrant</th><th>runs</th>'
        "<th>mean ppm</th><th>min ppm</th><th>max ppm</th><th>baseline</th></tr>",
    ]
    for c in d.calibrants:
        parts.append(
            f'<tr><td data-label="calibrant">{e(c.name)}</td>'
            f'<td data-label="runs">{c.runs} ({e(c.covers)})</td>'
            f'<td class="num" data-label="mean ppm">{_ppm(c.mean_ppm)}</td>'
            f'<td class="num" data-label="min ppm">{_ppm(c.min_ppm)}</td>'
            f'<td class="num" data-label="max ppm">{_ppm(c.max_ppm)}</td>'
            f'<td data-label="baseline">{e(c.baseline)}</td></tr>'
        )
    parts.append("</table></div>")
    parts.append(f"<h2>Findings ({len(d.findings)})</h2>")
    if d.findings:
        parts.append(
            '<div class="scroll"><table id="findings"><tr><th>time</th><th>file</th>'
            "<th>severity</th><th>check</th><th>subject</th><th>value</th><th>limit</th>"
            '<th>rule</th><th class="msg">message</th></tr>'
        )
        for f in d.findings:
            parts.append(
                f'<tr class="finding"><td data-label="time">{e(f.time)}</td>'
                f'<td data-label="file">{e(f.file)}</td>'
                f'<td class="{e(f.severity)}" data-label="severity">{e(f.severity)}'
                + (" (silenced)" if f.silenced else "")
                + "</td>"
                f'<td data-label="check">{e(f.check)}</td>'
                f'<td data-label="subject">{e(f.subject)}</td>'
                f'<td class="num" data-label="value">{e(f.value)}</td>'
                f'<td data-label="limit">{e(f.limit)}</td>'
                f'<td data-label="rule">{e(f.rule)}</td>'
                f'<td class="msg" data-label="message">{e(f.message)}</td></tr>'
            )
        parts.append("</table></div>")
    else:
        parts.append("<p>No findings.</p>")
    if d.unreadable:
        parts.append("<h2>Unreadable runs</h2><ul>")
        parts.extend(
            f'<li class="unreadable">{e(name)}: {e(error)}</li>' for name, error in d.unreadable
        )
        parts.append("</ul>")
    parts.extend(digest_controls.html_parts(d.controls))
    parts.append("<h2>Charts</h2>")
    for chart in d.charts:
        data = base64.b64encode(chart.png).decode("ascii")
        parts.append(
            f'<figure class="{e(chart.kind)}"><img alt="{e(chart.title)}" '
            f'src="data:image/png;base64,{data}"><figcaption>{e(chart.title)}</figcaption></figure>'
        )
    parts.append(
        "<p><small>An aid for the lab's own QC procedures, not a substitute for them.</small></p>"
    )
    parts.append("</body></html>")
    return "\n".join(parts)
