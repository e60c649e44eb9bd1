"""Inline SVG charts for the floor page: one value per run over time, with reference lines.

Pure: points in, SVG text out (no files, no database). Every text that came from outside (run
file names in the hover titles, calibrant and ion names) is XML-escaped here, so a file named
``<script>.mzML`` is text on the page, never markup. The status colours are the digest's
(``watcher.notify.plots.STATUS_COLOURS``), so a run reads the same on the page, in the digest
and in an alert's attachment. Hand-written rather than drawn by matplotlib: a 30-day chart of a
few thousand runs must render in well under the page's 500 ms budget (bench/serve_bench.py).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime, timedelta
from datetime import time as dtime
from html import escape
from typing import TYPE_CHECKING

from watcher.notify.plots import STATUS_COLOURS, wants_log_axis

if TYPE_CHECKING:
    from collections.abc import Sequence

WIDTH = 760
HEIGHT = 230
_LEFT, _RIGHT, _TOP, _BOTTOM = 64, 150, 26, 34
_PALETTE = ("#1565c0", "#ef6c00", "#2e7d32", "#6a1b9a", "#00838f", "#ad1457", "#4e342e")


@dataclass(frozen=True, slots=True)
class Point:
    at: datetime  # already in the zone the axis should read in
    value: float
    status: str | None = None  # colours the marker (the metric's own state in that run)
    label: str = ""  # hover text: the run's file name


@dataclass(frozen=True, slots=True)
class Line:
    name: str
    points: Sequence[Point]
    missing: Sequence[datetime] = ()  # looked for, not found: an x at the bottom


@dataclass(frozen=True, slots=True)
class Rule:
    """A horizontal reference line: the baseline mean, ±2/±3 SD, the lab's limits."""

    value: float
    label: str
    colour: str
    dash: str = ""  # SVG stroke-dasharray


def _nice_step(span: float, target: int = 5) -> float:
    raw = span / max(target, 1)
    if raw <= 0 or not math.isfinite(raw):
        return 1.0
    power = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if raw <= m * power:
            return float(m * power)
    return float(10 * power)


def _fmt(v: float) -> str:
    """A value in a hover text or legend: four significant digits."""
    return f"{v:.4g}"


def tick_text(v: float, step: float) -> str:
    """An axis label with as many decimals as the tick step needs; thousands and up with an SI
    suffix (``800k``, ``3.5M``), as intensities are read."""
    div, suffix = 1.0, ""
    for d, suf in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if abs(v) >= d:
            div, suffix = d, suf
            break
    scaled_step = f"{abs(step) / div:.6f}".rstrip("0")
    decimals = min(len(scaled_step.partition(".")[2]), 4)
    return f"{v / div:.{decimals}f}{suffix}"


def _time_ticks(start: datetime, end: datetime) -> list[tuple[datetime, str]]:
    span_s = (end - start).total_seconds()
    steps = (
        (600, "%H:%M"),
        (3600, "%H:%M"),
        (6 * 3600, "%d %b %H:%M"),
        (86400, "%d %b"),
        (7 * 86400, "%d %b"),
        (30 * 86400, "%b %Y"),
    )
    step_s, fmt = next(((s, f) for s, f in steps if span_s / s <= 7), steps[-1])
    ticks: list[tuple[datetime, str]] = []
    if step_s < 86400:
        # On the local clock's multiples of the step (06:00, 12:00 in the instrument's zone).
        offset_s = (start.utcoffset() or timedelta(0)).total_seconds()
        aligned = math.ceil((start.timestamp() + offset_s) / step_s) * step_s - offset_s
        first = datetime.fromtimestamp(aligned, start.tzinfo)
        at = first
        while at <= end and len(ticks) < 12:
            ticks.append((at, at.strftime(fmt)))
            at += timedelta(seconds=step_s)
        return ticks
    # Day steps at local midnight (the axis reads in the instrument's zone, DST days included).
    tz = start.tzinfo
    day = start.date() if start.time() == dtime(0) else start.date() + timedelta(days=1)
    days = step_s // 86400
    if days >= 28 and day.day != 1:
        day = (day.replace(day=1) + timedelta(days=32)).replace(day=1)
    while len(ticks) < 12:
        at = datetime.combine(day, dtime(0), tz)
        if at > end:
            break
        ticks.append((at, at.strftime(fmt)))
        if days >= 28:  # month steps: the first of each month
            day = (day.replace(day=1) + timedelta(days=32)).replace(day=1)
        else:
            day += timedelta(days=days)
    return ticks


def chart(
    lines: Sequence[Line],
    *,
    title: str,
    ylabel: str,
    start: datetime,
    end: datetime,
    rules: Sequence[Rule] = (),
    log_y: bool = False,
) -> str:
    """An SVG chart of ``lines`` over ``[start, end]``; ``rules`` as horizontal lines."""
    plot_w, plot_h = WIDTH - _LEFT - _RIGHT, HEIGHT - _TOP - _BOTTOM
    values = [p.value for line in lines for p in line.points if math.isfinite(p.value)]
    use_log = log_y and wants_log_axis(values)
    scale_values = values + [r.value for r in rules]
    if use_log:
        scale_values = [v for v in scale_values if v > 0]

    def tr(v: float) -> float:
        return math.log10(v) if use_log else v

    lo = min((tr(v) for v in scale_values), default=0.0)
    hi = max((tr(v) for v in scale_values), default=1.0)
    if hi - lo < 1e-9 * max(1.0, abs(hi)):
        # One value (or all equal): a band around it, not a span of rounding noise.
        half = 0.3 if use_log else max(abs(hi) * 0.1, 1.0)
        lo, hi = lo - half, hi + half
    pad = (hi - lo) * 0.06
    lo, hi = lo - pad, hi + pad
    t0, t1 = start.timestamp(), max(end.timestamp(), start.timestamp() + 1)

    x_scale, y_scale = plot_w / (t1 - t0), plot_h / (hi - lo)

    def x(at: datetime) -> float:
        return _LEFT + (at.timestamp() - t0) * x_scale

    def y(v: float) -> float:
        return _TOP + (hi - (math.log10(v) if use_log else v)) * y_scale

    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" '
        f'class="chart" aria-label="{escape(title)}">',
        f"<title>{escape(title)}</title>",
        f'<text x="{_LEFT}" y="16" class="ct">{escape(title)}</text>',
        f'<rect x="{_LEFT}" y="{_TOP}" width="{plot_w}" height="{plot_h}" class="frame"/>',
    ]
    # y grid and labels
    if use_log:
        ticks = [(10.0**e, 10.0**e) for e in range(math.floor(lo), math.ceil(hi) + 1)]
    else:
        step = _nice_step(hi - lo)
        first = math.ceil(lo / step) * step
        ticks = [(first + i * step, step) for i in range(int((hi - first) / step) + 1)]
    for v, tick_step in ticks:
        if not lo <= tr(v) <= hi:
            continue
        yy = y(v)
        out.append(
            f'<line x1="{_LEFT}" x2="{_LEFT + plot_w}" y1="{yy:.1f}" y2="{yy:.1f}" class="grid"/>'
        )
        label = escape(tick_text(v, tick_step))
        out.append(f'<text x="{_LEFT - 4}" y="{yy + 3:.1f}" class="yl">{label}</text>')
    for at, text in _time_ticks(start, end):
        xx = x(at)
        out.append(
            f'<line x1="{xx:.1f}" x2="{xx:.1f}" y1="{_TOP}" y2="{_TOP + plot_h}" class="grid"/>'
        )
        out.append(f'<text x="{xx:.1f}" y="{_TOP + plot_h + 14}" class="xl">{escape(text)}</text>')
    out.append(
        f'<text x="12" y="{_TOP + plot_h / 2:.0f}" class="yt" '
        f'transform="rotate(-90 12 {_TOP + plot_h / 2:.0f})">{escape(ylabel)}</text>'
    )
    legend: list[tuple[str, str, str]] = []
    for rule in rules:
        if use_log and rule.value <= 0:
            continue
        yy = y(rule.value)
        if not _TOP <= yy <= _TOP + plot_h:
            continue
        dash = f' stroke-dasharray="{rule.dash}"' if rule.dash else ""
        out.append(
            f'<line x1="{_LEFT}" x2="{_LEFT + plot_w}" y1="{yy:.1f}" y2="{yy:.1f}" '
            f'stroke="{rule.colour}" stroke-width="1.4"{dash}><title>{escape(rule.label)} '
            f"{escape(_fmt(rule.value))}</title></line>"
        )
        if (rule.label, rule.colour, rule.dash) not in legend:
            legend.append((rule.label, rule.colour, rule.dash))
    for n, line in enumerate(lines):
        colour = _PALETTE[n % len(_PALETTE)] if len(lines) > 1 else "#78909c"
        shown = [p for p in line.points if math.isfinite(p.value) and (p.value > 0 or not use_log)]
        pts = sorted(((p.at, p) for p in shown), key=lambda item: item[0])
        # Each point's position once: a 30-day chart holds thousands (bench/serve_bench.py).
        xy = [(f"{x(at):.1f}", f"{y(p.value):.1f}") for at, p in pts]
        gaps = sorted(line.missing)
        # The line breaks at a run where the ion was missing instead of bridging over it.
        segments: list[list[str]] = [[]]
        gi = 0
        for (at, _), (px, py) in zip(pts, xy, strict=True):
            while gi < len(gaps) and gaps[gi] < at:
                gi += 1
                if segments[-1]:
                    segments.append([])
            segments[-1].append(f"{px},{py}")
        for seg in segments:
            if len(seg) > 1:
                out.append(
                    f'<polyline fill="none" stroke="{colour}" stroke-width="1.2" '
                    f'points="{" ".join(seg)}"/>'
                )
        for (_, p), (px, py) in zip(pts, xy, strict=True):
            fill = STATUS_COLOURS.get(p.status, colour) if p.status else colour
            tip = escape(f"{p.label} {p.value:.4g}" if p.label else f"{p.value:.4g}")
            out.append(
                f'<circle cx="{px}" cy="{py}" r="3" fill="{fill}" class="pt">'
                f"<title>{tip}</title></circle>"
            )
        for at in gaps:
            xx, yy = x(at), _TOP + plot_h - 6
            out.append(
                f'<path d="M{xx - 4:.1f},{yy - 4:.1f}L{xx + 4:.1f},{yy + 4:.1f}'
                f'M{xx - 4:.1f},{yy + 4:.1f}L{xx + 4:.1f},{yy - 4:.1f}" stroke="{colour}" '
                f'stroke-width="2"><title>{escape(line.name)}: not found</title></path>'
            )
        if len(lines) > 1 or gaps:
            legend.append((line.name, colour, ""))
    if not values:
        out.append(
            f'<text x="{_LEFT + plot_w / 2:.0f}" y="{_TOP + plot_h / 2:.0f}" class="empty">'
            "no values in this range</text>"
        )
    for i, (label, colour, dash) in enumerate(legend[:10]):
        ly = _TOP + 8 + i * 14
        lx = _LEFT + plot_w + 8
        dash_attr = f' stroke-dasharray="{dash}"' if dash else ""
        out.append(
            f'<line x1="{lx}" x2="{lx + 16}" y1="{ly}" y2="{ly}" stroke="{colour}" '
            f'stroke-width="2"{dash_attr}/>'
        )
        out.append(f'<text x="{lx + 20}" y="{ly + 3}" class="lg">{escape(label[:22])}</text>')
    out.append("</svg>")
    return "".join(out)
