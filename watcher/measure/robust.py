"""Robust statistics over small float sequences: median, MAD, percentiles, Theil-Sen and line fits.

Pure numpy helpers shared by the metric modules; every function returns None instead of raising
when there is too little data, so callers can pass the result straight into a record.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from collections.abc import Sequence

    from watcher.measure.scan import FloatArray

# Theil-Sen holds every pairwise slope in memory, and the median a copy: 1000 points -> 0.5 M
# slopes (2 x 4 MB). Longer series are thinned to evenly spaced points, which keeps the fit
# deterministic and memory flat: at 2000 the 1 GB bench run peaked 22 MB above the 100 MB one.
THEIL_SEN_MAX_POINTS = 1000


def as_array(values: Sequence[float] | FloatArray) -> FloatArray:
    """``values`` as a float64 array without NaN or infinite entries."""
    arr = np.asarray(values, dtype=np.float64)
    return arr[np.isfinite(arr)]


def median_of(arr: FloatArray) -> float:
    """``np.median`` of a non-empty float array, to the bit; NaN when the array holds one.

    ``np.median`` and ``np.quantile`` import ``numpy.ma`` on first call (about 10 ms of every
    ``ionwarden check``'s start-up, measured with ``-X importtime``); the order statistics need
    nothing but a sort.
    """
    ordered = np.sort(arr)
    n = ordered.size
    if math.isnan(ordered[-1]):  # sort puts NaN last; np.median's answer is then NaN
        return math.nan
    half = n // 2
    if n % 2:
        return float(ordered[half])
    return float((ordered[half - 1] + ordered[half]) / 2.0)


def quantile_of(arr: FloatArray, q: float) -> float:
    """``np.quantile(arr, q)`` (its default ``linear`` method) of a non-empty float array, to
    the bit; NaN when the array holds one.

    The virtual index is ``(n - 1) q`` between the order statistics below and above it, and the
    interpolation is numpy's ``_lerp``: from the lower value for a fraction under 0.5, from the
    upper one above, which keeps the result monotonic and exact at the ends.
    """
    if not 0.0 <= q <= 1.0:
        raise ValueError(f"quantile {q!r} is outside [0, 1]")  # as np.quantile refuses it
    ordered = np.sort(arr)
    n = ordered.size
    if math.isnan(ordered[-1]):
        return math.nan
    virtual = (n - 1) * q
    below = min(max(math.floor(virtual), 0), n - 1)
    above = min(below + 1, n - 1)
    gamma = virtual - below
    low, high = float(ordered[below]), float(ordered[above])
    diff = high - low
    if gamma >= 0.5:
        return high - diff * (1 - gamma)
    return low + diff * gamma


def median(values: Sequence[float] | FloatArray) -> float | None:
    """Median of the finite values, None when there are none."""
    arr = as_array(values)
    return median_of(arr) if arr.size else None


def mad(values: Sequence[float] | FloatArray) -> float | None:
    """Median absolute deviation from the median, unscaled (multiply by 1.4826 for a normal SD)."""
    arr = as_array(values)
    if not arr.size:
        return None
    return median_of(np.abs(arr - median_of(arr)))


def percentile(values: Sequence[float] | FloatArray, q: float) -> float | None:
    """The q-th percentile (0-100, linear interpolation between order statistics)."""
    arr = as_array(values)
    return quantile_of(arr, q / 100) if arr.size else None


def theil_sen_slope(
    x: Sequence[float] | FloatArray,
    y: Sequence[float] | FloatArray,
    *,
    max_points: int = THEIL_SEN_MAX_POINTS,
) -> float | None:
    """Median of pairwise slopes (y_j - y_i) / (x_j - x_i) over pairs with distinct x.

    Args:
        x: abscissae (e.g. RT in seconds), same length as ``y``.
        y: ordinates (e.g. ppm).
        max_points: above this many points, evenly spaced points are used (deterministic).

    Returns:
        The slope in units of y per unit of x, or None with fewer than two distinct x values.
    """
    xs = np.asarray(x, dtype=np.float64)
    ys = np.asarray(y, dtype=np.float64)
    keep = np.isfinite(xs) & np.isfinite(ys)
    xs, ys = xs[keep], ys[keep]
    if xs.size > max_points:
        pick = np.linspace(0, xs.size - 1, max_points).round().astype(np.int64)
        xs, ys = xs[pick], ys[pick]
    n = xs.size
    if n < 2:
        return None
    slopes = np.empty(n * (n - 1) // 2, dtype=np.float64)
    filled = 0
    for i in range(n - 1):
        dx = xs[i + 1 :] - xs[i]
        dy = ys[i + 1 :] - ys[i]
        ok = dx != 0
        count = int(ok.sum())
        slopes[filled : filled + count] = dy[ok] / dx[ok]
        filled += count
    if filled == 0:
        return None
    return median_of(slopes[:filled])


def line_fit(
    x: Sequence[float] | FloatArray, y: Sequence[float] | FloatArray
) -> tuple[float, float] | None:
    """Ordinary least-squares line y = intercept + slope * x.

    Returns:
        (intercept, slope), or None with fewer than two distinct x values.
    """
    xs = np.asarray(x, dtype=np.float64)
    ys = np.asarray(y, dtype=np.float64)
    if xs.size < 2 or np.ptp(xs) == 0:
        return None
    x_mean = float(xs.mean())
    y_mean = float(ys.mean())
    dx = xs - x_mean
    slope = float((dx * (ys - y_mean)).sum() / (dx * dx).sum())
    return y_mean - slope * x_mean, slope
