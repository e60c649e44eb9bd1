"""Drift statistics over a run history: EWMA, tabular CUSUM and a Theil-Sen forecast to a limit.

Formulas from the NIST/SEMATECH e-Handbook of Statistical Methods: EWMA control chart (section
6.3.2.4) with the exact, time-varying limits, and the tabular CUSUM (section 6.3.2.3) on
standardised values. Pure functions: values in, numbers out.
"""

from __future__ import annotations

import itertools
import math
import statistics
from dataclasses import dataclass
from typing import TYPE_CHECKING

from watcher.rules.baseline import MAD_TO_SD

if TYPE_CHECKING:
    from collections.abc import Sequence


@dataclass(frozen=True, slots=True, kw_only=True)
class EwmaPoint:
    """The EWMA statistic after one run and its control limits (metric units)."""

    ewma: float
    lower: float
    upper: float

    @property
    def is_out(self) -> bool:
        return self.ewma > self.upper or self.ewma < self.lower


@dataclass(frozen=True, slots=True, kw_only=True)
class CusumPoint:
    """Upper and lower tabular CUSUM sums after one run, in SD units."""

    s_hi: float
    s_lo: float


def ewma(
    values: Sequence[float], *, mean: float, sd: float, lam: float, L: float
) -> list[EwmaPoint]:
    """EWMA statistic and limits for each value, oldest first.

    ``z_t = lam * x_t + (1 - lam) * z_{t-1}`` with ``z_0 = mean``; limits
    ``mean +- L * sd * sqrt(lam / (2 - lam) * (1 - (1 - lam)^(2t)))`` for t = 1, 2, ...
    """
    if not 0.0 < lam <= 1.0:
        raise ValueError(f"EWMA lambda must be in (0, 1], got {lam}")
    out: list[EwmaPoint] = []
    z = mean
    for t, x in enumerate(values, start=1):
        z = lam * x + (1.0 - lam) * z
        out.append(ewma_point(z, t, mean=mean, sd=sd, lam=lam, L=L))
    return out


def ewma_point(z: float, t: int, *, mean: float, sd: float, lam: float, L: float) -> EwmaPoint:
    """The EWMA statistic ``z`` after ``t`` values with its limits (formula in ``ewma``)."""
    half_width = L * sd * math.sqrt(lam / (2.0 - lam) * (1.0 - (1.0 - lam) ** (2 * t)))
    return EwmaPoint(ewma=z, lower=mean - half_width, upper=mean + half_width)


def cusum(values: Sequence[float], *, mean: float, sd: float, k: float) -> list[CusumPoint]:
    """Tabular CUSUM on standardised values ``z = (x - mean) / sd``, oldest first.

    ``S_hi = max(0, S_hi + z - k)``, ``S_lo = max(0, S_lo - z - k)``, both starting at 0; a
    signal is a sum above the decision interval h (compared by the caller). The sums are not
    reset after a signal: while the shift persists, every further run keeps signalling.
    """
    if sd <= 0.0:
        raise ValueError(f"CUSUM needs a positive SD, got {sd}")
    s_hi = s_lo = 0.0
    out: list[CusumPoint] = []
    for x in values:
        z = (x - mean) / sd
        s_hi = max(0.0, s_hi + z - k)
        s_lo = max(0.0, s_lo - z - k)
        out.append(CusumPoint(s_hi=s_hi, s_lo=s_lo))
    return out


def theil_sen(xs: Sequence[float], ys: Sequence[float]) -> tuple[float, float]:
    """Slope (median of pairwise slopes) and intercept (median of y - slope x) of a robust line.

    Raises:
        ValueError: with fewer than two distinct x values.
    """
    if len(xs) != len(ys):
        raise ValueError("theil_sen needs as many x as y values")
    slopes = [
        (ys[j] - ys[i]) / (xs[j] - xs[i])
        for i in range(len(xs))
        for j in range(i + 1, len(xs))
        if xs[j] != xs[i]
    ]
    if not slopes:
        raise ValueError("theil_sen needs at least two distinct x values")
    slope = statistics.median(slopes)
    intercept = statistics.median(y - slope * x for x, y in zip(xs, ys, strict=True))
    return slope, intercept


@dataclass(frozen=True, slots=True, kw_only=True)
class Forecast:
    """Where a robust linear drift is heading.

    Attributes:
        slope_per_h: metric units per hour (Theil-Sen over acquisition time).
        fitted_now: the fitted line at the current run's acquisition time.
        limit: the limit the line heads for.
        hours: hours from the current run until the line crosses ``limit`` (> 0).
    """

    slope_per_h: float
    fitted_now: float
    limit: float
    hours: float


MIN_FORECAST_POINTS = 5


MIN_TREND_TAU = 0.5  # Kendall tau a forecast needs, in the direction of the slope


def forecast(
    times_h: Sequence[float],
    values: Sequence[float],
    *,
    upper: float | None,
    lower: float | None,
) -> Forecast | None:
    """Hours until the Theil-Sen line through (time, value) crosses ``upper`` or ``lower``.

    Args:
        times_h: acquisition times in hours, oldest first; the last one is the current run.
        values: the metric at those times.
        upper: the value above which the run would be critical (None: no upper limit).
        lower: the value below which the run would be critical (None: no lower limit).

    Returns:
        None with fewer than ``MIN_FORECAST_POINTS`` points, a flat line, a line heading away from
        every limit, a fitted value already beyond the limit it heads for, or a line that does not
        describe the data (see ``_trend_holds``).
    """
    start = _last_step(values)
    times_h, values = list(times_h)[start:], list(values)[start:]
    if len(times_h) < MIN_FORECAST_POINTS:
        return None
    try:
        slope, intercept = theil_sen(times_h, values)
    except ValueError:
        return None
    fitted_now = intercept + slope * times_h[-1]
    if not _trend_holds(times_h, values, slope, intercept):
        return None
    if slope > 0.0 and upper is not None:
        limit = upper
    elif slope < 0.0 and lower is not None:
        limit = lower
    else:
        return None
    hours = (limit - fitted_now) / slope
    if not hours > 0.0 or not math.isfinite(hours):
        return None
    return Forecast(slope_per_h=slope, fitted_now=fitted_now, limit=limit, hours=hours)


def _trend_holds(
    times_h: Sequence[float], values: Sequence[float], slope: float, intercept: float
) -> bool:
    """Whether a straight line is a fair account of the window, so extrapolating it means something.

    The line must rise or fall by more than 2 robust spreads of the residuals (1.4826 x MAD)
    across the window, or the "trend" is scatter; and the runs must mostly move the line's way
    (Kendall's tau of at least ``MIN_TREND_TAU``). Step changes are cut off before this
    (``_last_step``); a run above the line in the trend's direction (an accelerating drift) is
    exactly what should be forecast, so the current run is not required to sit on the line.
    """
    residuals = [v - (intercept + slope * t) for t, v in zip(times_h, values, strict=True)]
    centre = statistics.median(residuals)
    spread = MAD_TO_SD * statistics.median(abs(r - centre) for r in residuals)
    # Noise-free data have a spread of 0: allow for float rounding relative to the values' size.
    spread = max(spread, 1e-9 * (1.0 + max(abs(v) for v in values)))
    if abs(slope * (times_h[-1] - times_h[0])) <= 2.0 * spread:
        return False
    # Kendall's tau: most pairs of runs must agree with the direction of the fitted line. A few
    # high runs followed by a recalibration can tilt a Theil-Sen line without being a trend.
    return kendall_tau_b(times_h, values) * math.copysign(1.0, slope) >= MIN_TREND_TAU


def kendall_tau_b(xs: Sequence[float], ys: Sequence[float]) -> float:
    """Kendall's tau-b: (concordant - discordant) / sqrt((n0 - ties_x) (n0 - ties_y)).

    Tau-b counts tied pairs in the denominator (Kendall 1945, "The treatment of ties in ranking
    problems"), so a flat stretch of equal values weakens the trend. Dividing by the untied pairs
    only (concordant + discordant) would be Goodman and Kruskal's gamma, which reads
    [1, 1, 1, 1, 1.2, 1.4] as a perfect trend (1.0 against tau-b 0.775). O(n^2) pairs: the
    forecast window is a few dozen runs. 0.0 when either side is constant.
    """
    n = len(xs)
    concordant = discordant = tied_x = tied_y = 0
    for i in range(n):
        for j in range(i + 1, n):
            dx = xs[j] - xs[i]
            dy = ys[j] - ys[i]
            tied_x += dx == 0
            tied_y += dy == 0
            product = dx * dy
            concordant += product > 0
            discordant += product < 0
    pairs = n * (n - 1) // 2
    denominator = math.sqrt((pairs - tied_x) * (pairs - tied_y))
    return (concordant - discordant) / denominator if denominator > 0 else 0.0


def _last_step(values: Sequence[float]) -> int:
    """Index where the current segment starts: just after the last jump between consecutive runs.

    A jump is a run-to-run change more than 4 robust spreads (1.4826 x MAD of all consecutive
    changes) away from the typical change: a recalibration, a new column, a cleaned source. A line
    fitted across it extrapolates a history that no longer applies, so only the runs after the
    last jump are fitted.
    """
    if len(values) < 3:
        return 0
    diffs = [b - a for a, b in itertools.pairwise(values)]
    centre = statistics.median(diffs)
    spread = MAD_TO_SD * statistics.median(abs(d - centre) for d in diffs)
    spread = max(spread, 1e-9 * (1.0 + max(abs(v) for v in values)))
    start = 0
    for i, d in enumerate(diffs):
        if abs(d - centre) > 4.0 * spread:
            start = i + 1
    return start
