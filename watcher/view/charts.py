"""The instrument page's charts from a ``FloorSource``: Levey-Jennings per calibrant, TIC, ions.

The same charts as the daily digest (``watcher.notify.digest``), over a chosen range: each
calibrant's median ppm per run with the rules' baseline (the lab's fixed mean and SD, else the
median and 1.4826 x MAD of the accepted runs before the range, ``watcher.rules.baseline``) and
±2/±3 SD lines, and the check's fixed warning and critical limits; the median MS1 TIC; each
expected ion's apex intensity, with an x where it was looked for and not found. Markers are
coloured by the metric's own state in that run (its worst finding), as in the digest.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from watcher.config import BaselineSpec
from watcher.rules.baseline import from_spec
from watcher.rules.checks import critical_bounds, matches_metric
from watcher.view import svg

if TYPE_CHECKING:
    from collections.abc import Sequence
    from datetime import datetime
    from zoneinfo import ZoneInfo

    from watcher.config import Check
    from watcher.view.source import FloorSource, RunView

_LIMIT_COLOURS = {"warning": ("#a66f00", "6 2"), "critical": ("#c62828", "")}


@dataclass(frozen=True, slots=True)
class ChartView:
    title: str
    kind: str  # levey-jennings, tic, ions
    svg: str  # escaped SVG markup, safe to insert as is


def check_for(checks: Sequence[Check], metric: str) -> Check | None:
    """The check whose baseline a chart of ``metric`` shows: a lab-set mean and SD first (the
    Westgard target), then one judged against a baseline, then any (as the digest chooses)."""
    matching = [c for c in checks if matches_metric(c.metric, metric)]
    for check in matching:
        if check.baseline.mean is not None and check.baseline.sd is not None:
            return check
    for check in matching:
        if check.against == "baseline" or check.westgard:
            return check
    return matching[0] if matching else None


def _number(value: object) -> float | None:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    return float(value) if math.isfinite(value) else None


def _state(run: RunView, metric: str) -> str:
    if not run.findings:  # most runs: no finding at all
        return "unreadable" if run.status == "unreadable" else "ok"
    ranks = {"notice": 1, "warning": 2, "critical": 3}
    worst = max(
        (str(f.severity) for f in run.findings if f.metric == metric),
        key=lambda s: ranks.get(s, 0),
        default=None,
    )
    return worst or ("unreadable" if run.status == "unreadable" else "ok")


def subjects(runs: Sequence[RunView], group: str, field: str) -> list[str]:
    """The calibrants or ions that have ``<group>.<name>.<field>`` in any of the runs."""
    head, tail = f"{group}.", f".{field}"
    paths: set[str] = set().union(*(run.metrics.keys() for run in runs))
    return sorted(
        path[len(head) : -len(tail)]
        for path in paths
        if path.startswith(head) and path.endswith(tail)
    )


def _rules(
    source: FloorSource, instrument: str, metric: str, check: Check | None, start: datetime
) -> list[svg.Rule]:
    spec = check.baseline if check is not None else BaselineSpec()
    earlier = source.before(
        instrument,
        metric,
        before=start,
        limit=spec.runs,
        applies_to=check.applies_to if check is not None else (),
    )
    accepted = [v for p in earlier if p.status.accepted and (v := _number(p.value)) is not None]
    rules: list[svg.Rule] = []
    baseline = from_spec(spec, accepted)
    if baseline is not None:
        rules.append(svg.Rule(baseline.centre, "baseline mean", "#2e7d32"))
        if baseline.sd > 0:
            for k, colour, dash in ((2, "#9e9d24", "5 3"), (3, "#6d4c41", "2 3")):
                for sign in (1, -1):
                    value = baseline.centre + sign * k * baseline.sd
                    rules.append(svg.Rule(value, f"±{k} SD", colour, dash))
    if check is not None:
        for level, condition in (("warning", check.warning), ("critical", check.critical)):
            colour, dash = _LIMIT_COLOURS[level]
            for bound in critical_bounds(condition):
                if bound is not None:
                    rules.append(svg.Rule(bound, f"{level} limit", colour, dash))
    return rules


def instrument_charts(
    source: FloorSource,
    instrument: str,
    runs: Sequence[RunView],
    *,
    start: datetime,
    end: datetime,
    tz: ZoneInfo,
) -> list[ChartView]:
    """Every chart of the instrument page for ``runs`` (acquired in ``[start, end)``)."""
    checks = source.checks(instrument)
    s_local, e_local = start.astimezone(tz), end.astimezone(tz)
    out: list[ChartView] = []
    for name in subjects(runs, "calibrant", "median_ppm"):
        metric = f"calibrant.{name}.median_ppm"
        check = check_for(checks, metric)
        points = [
            svg.Point(r.acquired_at.astimezone(tz), v, _state(r, metric), r.file_name)
            for r in runs
            if (check is None or check.applies_to_file(r.file_name))
            and (v := _number(r.metrics.get(metric))) is not None
        ]
        title = f"{name}: median mass error per run (Levey-Jennings)"
        out.append(
            ChartView(
                title=title,
                kind="levey-jennings",
                svg=svg.chart(
                    [svg.Line(name, points)],
                    title=title,
                    ylabel="ppm",
                    start=s_local,
                    end=e_local,
                    rules=_rules(source, instrument, metric, check, start),
                ),
            )
        )
    tic = [
        svg.Point(r.acquired_at.astimezone(tz), v, None, r.file_name)
        for r in runs
        if (v := _number(r.metrics.get("signal.tic_median"))) is not None
    ]
    title = "TIC: median MS1 total ion current per run"
    out.append(
        ChartView(
            title=title,
            kind="tic",
            svg=svg.chart(
                [svg.Line("TIC", tic)],
                title=title,
                ylabel="counts",
                start=s_local,
                end=e_local,
                log_y=True,
            ),
        )
    )
    ions = subjects(runs, "expected_ion", "found")
    if ions:
        lines = []
        for ion in ions:
            found_key, value_key = f"expected_ion.{ion}.found", f"expected_ion.{ion}.apex_intensity"
            pts = [
                svg.Point(r.acquired_at.astimezone(tz), v, None, r.file_name)
                for r in runs
                if r.metrics.get(found_key) is not False
                and (v := _number(r.metrics.get(value_key))) is not None
            ]
            missing = [
                r.acquired_at.astimezone(tz) for r in runs if r.metrics.get(found_key) is False
            ]
            lines.append(svg.Line(ion, pts, missing))
        title = "expected ions: apex intensity (x: not found)"
        out.append(
            ChartView(
                title=title,
                kind="ions",
                svg=svg.chart(
                    lines, title=title, ylabel="counts", start=s_local, end=e_local, log_y=True
                ),
            )
        )
    return out
