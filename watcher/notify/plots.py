"""PNG charts for the digest and alert attachments, drawn with matplotlib's Agg backend.

Pure in the sense that matters: plain points in, PNG bytes out; no database, no files. Uses the
object API (``Figure`` + ``FigureCanvasAgg``), not pyplot, so that the delivery thread and the
daemon's main thread can draw without sharing pyplot's global state.
"""

from __future__ import annotations

import io
from datetime import datetime
from typing import TYPE_CHECKING

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.dates import AutoDateLocator, ConciseDateFormatter, date2num
from matplotlib.figure import Figure
from matplotlib.ticker import EngFormatter

if TYPE_CHECKING:
    from collections.abc import Mapping, Sequence

    from matplotlib.axes import Axes

Point = tuple[datetime, float]

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


def _png(fig: Figure) -> bytes:
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def levey_jennings(
    points: Sequence[Point],
    *,
    mean: float | None,
    sd: float | None,
    title: str,
    ylabel: str = "median ppm",
    statuses: Sequence[str] | None = None,
) -> bytes:
    """A Levey-Jennings chart: one value per run with the mean and ±2 SD / ±3 SD lines.

    Args:
        points: (run time, value) in time order.
        mean, sd: the baseline; lines are left out when either is None or sd <= 0.
        statuses: optional run status per point, to colour the markers.
    """
    fig, ax = _figure(title)
    xs = _x([p[0] for p in points])
    ys = [p[1] for p in points]
    ax.plot(xs, ys, color="#455a64", linewidth=1, zorder=2)
    colours = [STATUS_COLOURS.get(s, "#455a64") for s in statuses] if statuses else "#455a64"
    ax.scatter(xs, ys, c=colours, s=18, zorder=3)
    if mean is not None and sd is not None and sd > 0:
        ax.axhline(mean, color="#2e7d32", linewidth=1, label="mean")
        for k, style, colour in ((2, "--", "#f9a825"), (3, ":", "#c62828")):
            for sign in (1, -1):
                ax.axhline(
                    mean + sign * k * sd,
                    color=colour,
                    linestyle=style,
                    linewidth=1,
                    label=f"±{k} SD" if sign == 1 else None,
                )
        ax.legend(fontsize=7, loc="best")
    ax.set_ylabel(ylabel, fontsize=8)
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
) -> bytes:
    """One or more named series over run time (TIC, ion intensities, apex RT)."""
    fig, ax = _figure(title)
    any_points = False
    for name, points in lines.items():
        if not points:
            continue
        any_points = True
        ax.plot(
            _x([p[0] for p in points]), [p[1] for p in points], marker="o", markersize=3, label=name
        )
    values = [p[1] for points in lines.values() for p in points]
    if log_y and wants_log_axis(values):
        ax.set_yscale("log")
    elif log_y:
        # Counts within one decade: a log axis only labels "9 x 10^5"-style minor ticks there.
        ax.yaxis.set_major_formatter(EngFormatter(sep=" "))
    if any_points:
        _dates(ax)
        if len(lines) > 1:
            ax.legend(fontsize=7, loc="best")
    ax.set_ylabel(ylabel, fontsize=8)
    return _png(fig)


def status_timeline(points: Sequence[tuple[datetime, str]], *, title: str) -> bytes:
    """Each run as a mark at its time, on the row of its status."""
    fig, ax = _figure(title, height_in=1.9)
    for row, status in enumerate(_STATUS_ORDER):
        xs = _x([t for t, s in points if s == status])
        if xs:
            ax.scatter(xs, [row] * len(xs), color=STATUS_COLOURS[status], marker="|", s=200)
    ax.set_yticks(range(len(_STATUS_ORDER)), _STATUS_ORDER, fontsize=8)
    ax.set_ylim(-0.5, len(_STATUS_ORDER) - 0.5)
    if points:
        _dates(ax)
    return _png(fig)
