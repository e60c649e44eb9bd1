"""The daily digest: one day's runs, findings and charts, as a terminal summary and an HTML page.

``build_digest`` reads the run history (``watcher.store.history.runs_between``) and draws the
charts; ``render_text`` and ``render_html`` only format. The HTML is self-contained: inline CSS,
charts as base64 ``data:`` PNGs, no scripts and no external resources, so it can be mailed,
attached or opened from a USB stick.
"""

from __future__ import annotations

import base64
import fnmatch
import html
import statistics
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta
from typing import Any
from zoneinfo import ZoneInfo

from watcher.config import Check, Config
from watcher.notify import plots
from watcher.notify.alert_text import format_value

_ACCEPTED = ("ok", "notice")
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
    severity: str
    value: str
    limit: str
    rule: str
    message: str


@dataclass(frozen=True, slots=True, kw_only=True)
class CalibrantSummary:
    name: str
    runs: int
    mean_ppm: float | None
    min_ppm: float | None
    max_ppm: float | None
    baseline: str  # where the chart's mean/SD come from


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


# -- reading the history ----------------------------------------------------------------------


def _history(history: Any) -> Any:
    if history is not None:
        return history
    from watcher.store import history as real

    return real


def _get(obj: Any, name: str) -> Any:
    if isinstance(obj, Mapping):
        return obj.get(name)
    return getattr(obj, name, None)


def _as_datetime(value: Any) -> datetime | None:
    if value is None:
        return None
    if isinstance(value, datetime):
        return value if value.tzinfo else value.replace(tzinfo=UTC)
    if isinstance(value, int | float):
        return datetime.fromtimestamp(value, UTC)
    parsed = datetime.fromisoformat(str(value))
    return parsed if parsed.tzinfo else parsed.replace(tzinfo=UTC)


def _run_time(run: Any) -> datetime | None:
    return _as_datetime(_get(run, "acquired_at")) or _as_datetime(_get(run, "judged_at"))


def _value(run: Any, metric: str) -> float | None:
    metrics = _get(run, "metrics") or {}
    value = metrics.get(metric)
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
    so the chart's lines are the ones the rules judged against.
    """
    matching = [c for c in config.checks if fnmatch.fnmatchcase(metric, c.metric)]
    for check in matching:
        if check.baseline.mean is not None and check.baseline.sd is not None:
            return check
    for check in matching:
        if check.against == "baseline" or check.westgard:
            return check
    return matching[0] if matching else None


def _applies(check: Check | None, run: Any) -> bool:
    return check is None or check.applies_to_file(str(_get(run, "file_name") or ""))


def _baseline(
    config: Config, metric: str, earlier_runs: Sequence[Any], day_runs: Sequence[Any]
) -> tuple[float | None, float | None, str]:
    """Mean and SD for a Levey-Jennings chart: fixed in the check, else recent accepted runs."""
    check = _check_for(config, metric)
    if check is not None and check.baseline.mean is not None and check.baseline.sd is not None:
        return check.baseline.mean, check.baseline.sd, f"fixed by check '{check.name}'"
    n_runs = check.baseline.runs if check is not None else 20
    accepted = [
        v
        for run in earlier_runs
        if _get(run, "status") in _ACCEPTED
        and _applies(check, run)
        and (v := _value(run, metric)) is not None
    ][-n_runs:]
    source = f"last {len(accepted)} accepted runs before the day"
    if len(accepted) < 2:
        accepted = [
            v
            for run in day_runs
            if _get(run, "status") in _ACCEPTED
            and _applies(check, run)
            and (v := _value(run, metric)) is not None
        ]
        source = f"the day's {len(accepted)} accepted runs (no earlier baseline)"
    if len(accepted) < 2:
        return None, None, "not enough accepted runs for a baseline"
    return statistics.fmean(accepted), statistics.stdev(accepted), source


# -- building ---------------------------------------------------------------------------------


def build_digest(conn: Any, config: Config, day: date, *, history: Any = None) -> Digest:
    """Collect one local day of runs and draw its charts.

    Args:
        conn: the state database (read only is enough).
        config: the lab config (instrument, calibrants, expected ions, checks).
        day: the day in the instrument's time zone.
        history: the run-history module (default ``watcher.store.history``).
    """
    hist = _history(history)
    tz_name = config.instrument.timezone
    tz = ZoneInfo(tz_name)
    start, end = day_bounds(day, tz_name)
    runs = sorted(
        hist.runs_between(conn, start, end),
        key=lambda r: _run_time(r) or start,
    )
    earlier = sorted(
        hist.runs_between(conn, start - _BASELINE_LOOKBACK, start),
        key=lambda r: _run_time(r) or start,
    )
    by_status = Counter(str(_get(r, "status")) for r in runs)

    findings: list[FindingRow] = []
    unreadable: list[tuple[str, str]] = []
    for run in runs:
        at = _run_time(run)
        when = at.astimezone(tz).strftime("%H:%M") if at else "--:--"
        file_name = str(_get(run, "file_name") or "")
        if _get(run, "status") == "unreadable":
            unreadable.append((file_name, str(_get(run, "error") or "unreadable")))
        for f in _get(run, "findings") or ():
            findings.append(
                FindingRow(
                    time=when,
                    file=file_name,
                    check=str(_get(f, "check")),
                    severity=str(_get(f, "severity")),
                    value=with_unit(format_value(_get(f, "value")), _get(f, "metric")),
                    limit=with_unit(str(_get(f, "limit") or ""), _get(f, "metric")),
                    rule=str(_get(f, "rule") or ""),
                    message=str(_get(f, "message") or ""),
                )
            )

    charts: list[Chart] = []
    summaries: list[CalibrantSummary] = []
    for cal in config.calibrants:
        metric = f"calibrant.{cal.name}.median_ppm"
        check = _check_for(config, metric)
        pts = [
            (t, v, str(_get(r, "status")))
            for r in runs
            if _applies(check, r)
            and (t := _run_time(r)) is not None
            and (v := _value(r, metric)) is not None
        ]
        mean, sd, source = _baseline(config, metric, earlier, runs)
        values = [p[1] for p in pts]
        summaries.append(
            CalibrantSummary(
                name=cal.name,
                runs=len(values),
                mean_ppm=statistics.fmean(values) if values else None,
                min_ppm=min(values) if values else None,
                max_ppm=max(values) if values else None,
                baseline=source,
            )
        )
        charts.append(
            Chart(
                title=f"Levey-Jennings: {cal.name} median ppm (baseline: {source})",
                png=plots.levey_jennings(
                    [(p[0].astimezone(tz), p[1]) for p in pts],
                    mean=mean,
                    sd=sd,
                    title=f"{cal.name} (m/z {cal.mz:.4f})" if cal.mz else cal.name,
                    statuses=[p[2] for p in pts],
                ),
                kind="levey-jennings",
            )
        )

    def line(metric: str) -> list[plots.Point]:
        return [
            (t.astimezone(tz), v)
            for r in runs
            if (t := _run_time(r)) is not None and (v := _value(r, metric)) is not None
        ]

    charts.append(
        Chart(
            title="TIC (median MS1 total ion current) per run",
            png=plots.series(
                {"TIC median": line("signal.tic_median")}, title="TIC", ylabel="counts", log_y=True
            ),
            kind="tic",
        )
    )
    if config.expected_ions:
        names = [e.ion.name for e in config.expected_ions]
        intensity = {n: line(f"expected_ion.{n}.apex_intensity") for n in names}
        apex_rt_min = {
            n: [(t, v / 60.0) for t, v in line(f"expected_ion.{n}.apex_rt_s")] for n in names
        }
        charts.append(
            Chart(
                title="Expected ions: apex intensity per run",
                png=plots.series(intensity, title="apex intensity", ylabel="counts", log_y=True),
                kind="ion-intensity",
            )
        )
        charts.append(
            Chart(
                title="Expected ions: apex retention time per run",
                png=plots.series(apex_rt_min, title="apex RT", ylabel="RT (min)"),
                kind="ion-rt",
            )
        )
    timeline = [
        (t.astimezone(tz), str(_get(r, "status"))) for r in runs if (t := _run_time(r)) is not None
    ]
    charts.append(
        Chart(
            title="Run status over the day",
            png=plots.status_timeline(timeline, title="status"),
            kind="status",
        )
    )
    return Digest(
        day=day,
        instrument=config.instrument.name,
        timezone=tz_name,
        run_count=len(runs),
        by_status=dict(by_status),
        calibrants=tuple(summaries),
        findings=tuple(findings),
        unreadable=tuple(unreadable),
        charts=tuple(charts),
    )


def metric_history_png(
    conn: Any, config: Config, metric: str, *, end_s: float, history: Any = None
) -> bytes | None:
    """A small chart of one metric over the last week's runs, for an alert attachment."""
    hist = _history(history)
    end = datetime.fromtimestamp(end_s, UTC)
    runs = hist.runs_between(conn, end - timedelta(days=7), end + timedelta(seconds=1))
    check = _check_for(config, metric)
    tz = ZoneInfo(config.instrument.timezone)
    pts = [
        (t.astimezone(tz), v, str(_get(r, "status")))
        for r in runs
        if _applies(check, r)
        and (t := _run_time(r)) is not None
        and (v := _value(r, metric)) is not None
    ][-50:]
    if not pts:
        return None
    mean, sd, _ = _baseline(config, metric, [], runs)
    return plots.levey_jennings(
        [(p[0], p[1]) for p in pts],
        mean=mean,
        sd=sd,
        title=metric,
        ylabel=metric.rsplit(".", 1)[-1],
        statuses=[p[2] for p in pts],
    )


# -- rendering --------------------------------------------------------------------------------

_STATUS_ORDER = ("ok", "notice", "warning", "critical", "unreadable")


def _counts(d: Digest) -> str:
    return ", ".join(f"{s} {d.by_status.get(s, 0)}" for s in _STATUS_ORDER)


def _ppm(v: float | None) -> str:
    return "n/a" if v is None else f"{v:+.2f}"


def render_text(d: Digest) -> str:
    """The terminal (and message body) summary: counts, calibrant drift, findings."""
    lines = [
        f"{d.instrument}: digest for {d.day.isoformat()} ({d.timezone})",
        f"runs: {d.run_count} ({_counts(d)})",
    ]
    for c in d.calibrants:
        lines.append(
            f"calibrant {c.name}: mean {_ppm(c.mean_ppm)} ppm, range {_ppm(c.min_ppm)} to "
            f"{_ppm(c.max_ppm)} ppm over {c.runs} runs"
        )
    lines.append(f"findings: {len(d.findings)}")
    for f in d.findings[:20]:
        lines.append(f"  {f.time} {f.file} {f.severity} {f.check}: {f.value} ({f.limit}, {f.rule})")
    if len(d.findings) > 20:
        lines.append(f"  ... and {len(d.findings) - 20} more (see the HTML page)")
    for file_name, error in d.unreadable:
        lines.append(f"unreadable: {file_name}: {error}")
    return "\n".join(lines)


_CSS = """
body{font-family:system-ui,sans-serif;margin:1.5em;color:#222;max-width:60em}
h1{font-size:1.4em}h2{font-size:1.1em;margin-top:1.6em}
table{border-collapse:collapse;font-size:.9em}td,th{border:1px solid #ccc;padding:.25em .5em}
th{background:#f3f3f3;text-align:left}.critical{color:#c62828}.warning{color:#a66f00}
.unreadable{color:#6a1b9a}figure{margin:1em 0}figcaption{font-size:.85em;color:#555}
img{max-width:100%;height:auto;border:1px solid #eee}td.num{white-space:nowrap}
"""


def render_html(d: Digest) -> str:
    """The self-contained HTML page (inline CSS, charts as data: URIs, no scripts)."""
    e = html.escape
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{e(d.instrument)} digest {d.day.isoformat()}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<h1>{e(d.instrument)}: daily digest {d.day.isoformat()}</h1>",
        f"<p>Times in {e(d.timezone)}. Runs: <strong>{d.run_count}</strong> ({e(_counts(d))}).</p>",
        "<h2>Calibrants</h2><table><tr><th>calibrant</th><th>runs</th><th>mean ppm</th>"
        "<th>min ppm</th><th>max ppm</th><th>baseline</th></tr>",
    ]
    for c in d.calibrants:
        parts.append(
            f"<tr><td>{e(c.name)}</td><td>{c.runs}</td><td>{_ppm(c.mean_ppm)}</td>"
            f"<td>{_ppm(c.min_ppm)}</td><td>{_ppm(c.max_ppm)}</td><td>{e(c.baseline)}</td></tr>"
        )
    parts.append("</table>")
    parts.append(f"<h2>Findings ({len(d.findings)})</h2>")
    if d.findings:
        parts.append(
            '<table id="findings"><tr><th>time</th><th>file</th><th>severity</th><th>check</th>'
            "<th>value</th><th>limit</th><th>rule</th><th>message</th></tr>"
        )
        for f in d.findings:
            parts.append(
                f'<tr class="finding"><td>{e(f.time)}</td><td>{e(f.file)}</td>'
                f'<td class="{e(f.severity)}">{e(f.severity)}</td><td>{e(f.check)}</td>'
                f'<td class="num">{e(f.value)}</td><td class="num">{e(f.limit)}</td>'
                f"<td>{e(f.rule)}</td>"
                f"<td>{e(f.message)}</td></tr>"
            )
        parts.append("</table>")
    else:
        parts.append("<p>No findings.</p>")
    if d.unreadable:
        parts.append("<h2>Unreadable runs</h2><ul>")
        parts.extend(
            f'<li class="unreadable">{e(name)}: {e(error)}</li>' for name, error in d.unreadable
        )
        parts.append("</ul>")
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
