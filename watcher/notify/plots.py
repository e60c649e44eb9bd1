"""PNG charts for the digest and alert attachments, drawn with matplotlib's Agg backend.

Pure in the sense that matters: plain points in, PNG bytes out; no database, no files. Uses the
object API (``Figure`` + ``FigureCanvasAgg``), not pyplot, so that the delivery thread and the
daemon's main thread can draw without sharing pyplot's global state.
"""

from __future__ import annotations

import io
from datetime import datetime
from typing import TYPE_CHECKING, Any

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.dates import AutoDateLocator, ConciseDateFormatter, date2num
from matplotlib.figure import Figure
from matplotlib.ticker import EngFormatter

if TYPE_CHECKING:
    from collections.abc import Mapping, Sequence

    from matplotlib.axes import Axes

Point = tuple[datetime, float]
Mark = tuple[datetime, str]  # an event on the record: its local time and its label

MARK_COLOUR = "#00838f"  # events' vertical lines: a teal no status or limit uses

STATUS_COLOURS = {
    "ok": "#2e7d32",
    "notice": "#1565c0",
    "warning": "#f9a825",
    "critical": "#c62828",
    "unreadable": "#6a1b9a",
}
_STATUS_ORDER = ["ok", "notice", "warning", "critical", "unreadable"]


def _figure(title: str, *, height_in: float = 2.6) -> tuple[Figure, Axes]:
    fig = Figure(figsize=(7.0, height_in), dpi=100, layout="constrained")
    ax = fig.add_subplot()
    ax.set_title(title, fontsize=10, loc="left")
    ax.grid(True, alpha=0.3)
    return fig, ax


def _dates(ax: Axes) -> None:
    locator = AutoDateLocator()  # type: ignore[no-untyped-call]
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(ConciseDateFormatter(locator))  # type: ignore[no-untyped-call]


def _x(times: Sequence[datetime]) -> list[float]:
    """Datetimes as matplotlib date numbers (days), which the date axis formats.

    Wall-clock time as given: matplotlib would convert aware datetimes to UTC, and the digest's
    axes must read in the instrument's zone, as its tables do.
    """
    return [float(date2num(t.replace(tzinfo=None))) for t in times]  # type: ignore[no-untyped-call]


def event_marks(ax: Axes, marks: Sequence[Mark]) -> None:
    """Each event as a vertical line at its time, labelled at the top of the plot area.

    Drawn after the data, so the axis limits are the data's; an event outside them still shows
    (matplotlib widens the view), which is what a column change just before the day needs.
    """
    for n, (at, label) in enumerate(marks):
        x = _x([at])[0]
        ax.axvline(x, color=MARK_COLOUR, linewidth=1.6, linestyle="-", zorder=5)
        ax.annotate(
            label,
            xy=(x, 1.0),
            xycoords=("data", "axes fraction"),
            xytext=(3, -10 - 9 * (n % 3)),  # staggered: events close in time stay legible
            textcoords="offset points",
            fontsize=7,
            color=MARK_COLOUR,
            ha="left",
            va="top",
        )


def _png(fig: Figure) -> bytes:
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


_LIMIT_STYLE: dict[str, tuple[str, Any]] = {
    "warning": ("#a66f00", (0, (6, 2))),
    "critical": ("#c62828", "solid"),
}


def levey_jennings(
    points: Sequence[Point],
    *,
    mean: float | None,
    sd: float | None,
    title: str,
    ylabel: str = "median ppm",
    statuses: Sequence[str] | None = None,
    limits: Sequence[tuple[float, str]] = (),
    marks: Sequence[Mark] = (),
) -> bytes:
    """A Levey-Jennings chart: one value per run with the mean and ±2 SD / ±3 SD lines.

    Args:
        points: (run time, value) in time order.
        mean, sd: the baseline; lines are left out when either is None or sd <= 0.
        statuses: per point, this metric's own state in that run (its worst finding, or ``ok``),
            to colour the markers; a legend names the colours.
        limits: the lab's fixed limits as (value, "warning" or "critical"), drawn as bold
            horizontal lines with their value, with or without a baseline.
        marks: events on the record (``ionwarden note``), drawn as labelled vertical lines.
    """
    fig, ax = _figure(title)
    xs = _x([p[0] for p in points])
    ys = [p[1] for p in points]
    ax.plot(xs, ys, color="#90a4ae", linewidth=1, zorder=2)
    states = list(statuses) if statuses else ["ok"] * len(points)
    for state in _STATUS_ORDER:
        sel = [i for i, s in enumerate(states) if s == state]
        if sel:
            ax.scatter(
                [xs[i] for i in sel],
                [ys[i] for i in sel],
                color=STATUS_COLOURS[state],
                s=22,
                zorder=3,
                label=f"run: {state}",
                edgecolors="white",
                linewidths=0.5,
            )
    if mean is not None and sd is not None and sd > 0:
        ax.axhline(mean, color="#2e7d32", linewidth=1, label="baseline mean")
        for k, style, colour in ((2, "--", "#9e9d24"), (3, ":", "#6d4c41")):
            for sign in (1, -1):
                ax.axhline(
                    mean + sign * k * sd,
                    color=colour,
                    linestyle=style,
                    linewidth=1,
                    label=f"±{k} SD" if sign == 1 else None,
                )
    seen: set[str] = set()
    for value, level in limits:
        colour, style = _LIMIT_STYLE.get(level, ("#c62828", "solid"))
        ax.axhline(
            value,
            color=colour,
            linestyle=style,
            linewidth=2,
            label=f"{level} limit" if level not in seen else None,
        )
        seen.add(level)
        ax.annotate(
            f"{value:g}",
            xy=(1.0, value),
            xycoords=("axes fraction", "data"),
            fontsize=7,
            color=colour,
            ha="left",
            va="center",
        )
    event_marks(ax, marks)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.04, 1.0), borderaxespad=0)
    ax.set_ylabel(ylabel, fontsize=8)
    ax.set_xlabel("acquired (instrument time)", fontsize=8)
    if xs:
        _dates(ax)
    return _png(fig)


def wants_log_axis(values: Sequence[float]) -> bool:
    """A log y axis pays off only when the positive values span at least one decade."""
    positive = [v for v in values if v > 0]
    return len(positive) == len(values) and bool(positive) and max(positive) >= 10 * min(positive)


def series(
    lines: Mapping[str, Sequence[Point]],
    *,
    title: str,
    ylabel: str,
    log_y: bool = False,
    missing: Mapping[str, Sequence[datetime]] | None = None,
    marks: Sequence[Mark] = (),
) -> bytes:
    """One or more named series over run time (TIC, ion intensities, apex RT).

    ``missing``: per series, the runs where it was looked for and not found; each is an ``x`` at
    the bottom of the chart in the series' colour, and the series' line breaks there instead of
    bridging over it. Series get distinct markers as well as colours.
    """
    fig, ax = _figure(title)
    any_points = False
    markers = "osD^v<>P*X"
    gaps = missing or {}
    for n, (name, points) in enumerate(lines.items()):
        absent = sorted(gaps.get(name, ()))
        if not points and not absent:
            continue
        any_points = True
        # A None value at each missing run breaks the line there (matplotlib skips NaN).
        merged = sorted([(t, v) for t, v in points] + [(t, float("nan")) for t in absent])
        (line,) = ax.plot(
            _x([p[0] for p in merged]),
            [p[1] for p in merged],
            marker=markers[n % len(markers)],
            markersize=3.5,
            label=name,
        )
        if absent:
            ax.scatter(
                _x(absent),
                [0.02] * len(absent),
                transform=ax.get_xaxis_transform(),
                marker="x",
                s=40,
                color=line.get_color(),
                label=f"{name}: not found",
                zorder=4,
            )
    values = [p[1] for points in lines.values() for p in points]
    if log_y and wants_log_axis(values):
        ax.set_yscale("log")
    elif log_y:
        # Counts within one decade: a log axis only labels "9 x 10^5"-style minor ticks there.
        ax.yaxis.set_major_formatter(EngFormatter(sep=" "))
    event_marks(ax, marks)
    if any_points:
        _dates(ax)
        if len(lines) > 1 or gaps:
            ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.04, 1.0), borderaxespad=0)
    ax.set_ylabel(ylabel, fontsize=8)
    ax.set_xlabel("acquired (instrument time)", fontsize=8)
    return _png(fig)


def status_timeline(
    points: Sequence[tuple[datetime, str]],
    *,
    title: str,
    names: Sequence[str] | None = None,
    marks: Sequence[Mark] = (),
) -> bytes:
    """Each run as a mark at its time, on the row of its status; with ``names`` (one per point)
    each mark is labelled with its run's file name (up to 40 runs; more would not be legible)."""
    fig, ax = _figure(title, height_in=2.4 if names else 1.9)
    for row, status in enumerate(_STATUS_ORDER):
        xs = _x([t for t, s in points if s == status])
        if xs:
            ax.scatter(xs, [row] * len(xs), color=STATUS_COLOURS[status], marker="|", s=200)
    if names and len(points) <= 40:
        for (t, status), name in zip(points, names, strict=True):
            ax.annotate(
                name,
                xy=(_x([t])[0], _STATUS_ORDER.index(status) if status in _STATUS_ORDER else 0),
                xytext=(2, 6),
                textcoords="offset points",
                fontsize=6,
                rotation=45,
                color="#37474f",
            )
    ax.set_yticks(range(len(_STATUS_ORDER)), _STATUS_ORDER, fontsize=8)
    ax.set_ylim(-0.5, len(_STATUS_ORDER) + 0.5)
    event_marks(ax, marks)
    ax.set_xlabel("acquired (instrument time)", fontsize=8)
    if points:
        _dates(ax)
    return _png(fig)
