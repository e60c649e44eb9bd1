"""EWMA, CUSUM and the Theil-Sen forecast against hand computations.

Formulas: NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.2.4 (EWMA control charts,
exact time-varying limits) and section 6.3.2.3 (tabular CUSUM on standardised values). The
expected numbers below were worked out by hand from those formulas and are written as literals.
"""

from __future__ import annotations

import numpy as np
import pytest

from watcher.rules.trend import cusum, ewma, forecast, theil_sen


def test_ewma_statistic_and_limits_match_hand_computation() -> None:
    """z_t = lam x_t + (1 - lam) z_(t-1) from z_0 = mean, limits with the (1-(1-lam)^2t) factor."""
    points = ewma([11.0, 9.0, 12.0], mean=10.0, sd=1.0, lam=0.2, L=3.0)
    # Hand (e-Handbook 6.3.2.4): z1 = 0.2*11 + 0.8*10 = 10.2; z2 = 0.2*9 + 0.8*10.2 = 9.96;
    # z3 = 0.2*12 + 0.8*9.96 = 10.368.
    assert [p.ewma for p in points] == pytest.approx([10.2, 9.96, 10.368])
    # Half widths 3*sqrt(0.2/1.8*(1-0.8^(2t))): t=1: 3*sqrt(0.04) = 0.6;
    # t=2: 3*sqrt(0.0656) = 0.768375; t=3: 3*sqrt(0.081984) = 0.858985.
    assert [p.upper for p in points] == pytest.approx([10.6, 10.768375, 10.858985], abs=1e-6)
    assert [p.lower for p in points] == pytest.approx([9.4, 9.231625, 9.141015], abs=1e-6)
    assert not any(p.is_out for p in points)


def test_ewma_signals_a_small_sustained_shift() -> None:
    """A +1.5 SD shift held for a few runs takes the EWMA past its upper limit."""
    points = ewma([0.0, 0.0, 1.5, 1.5, 1.5, 1.5, 1.5], mean=0.0, sd=1.0, lam=0.2, L=3.0)
    # Hand (e-Handbook 6.3.2.4): after five runs at 1.5 the EWMA is 1.5*(1-0.8^5) = 1.00848;
    # limit t=7: 0.8^14 = 0.043980, 3*sqrt((1-0.043980)/9) = 0.97776. One run earlier (t=6):
    # EWMA 1.5*(1-0.8^4) = 0.8856 against 3*sqrt((1-0.8^12)/9) = 0.96503.
    assert points[-1].ewma == pytest.approx(1.00848, abs=1e-5)
    assert points[-1].upper == pytest.approx(0.97776, abs=1e-5)
    assert points[-2].ewma == pytest.approx(0.8856, abs=1e-5)
    assert points[-2].upper == pytest.approx(0.96503, abs=1e-5)
    assert points[-1].is_out
    assert not points[-2].is_out


def test_cusum_sums_match_hand_computation() -> None:
    """S_hi = max(0, S_hi + z - k) and S_lo = max(0, S_lo - z - k) on z = (x - mean)/sd."""
    points = cusum([12.0, 13.0, 9.0, 6.0, 7.0], mean=10.0, sd=2.0, k=0.5)
    # Hand (e-Handbook 6.3.2.3): z = 1, 1.5, -0.5, -2, -1.5
    # S_hi: 0.5, 1.5, 0.5, 0, 0        S_lo: 0, 0, 0, 1.5, 2.5
    assert [p.s_hi for p in points] == pytest.approx([0.5, 1.5, 0.5, 0.0, 0.0])
    assert [p.s_lo for p in points] == pytest.approx([0.0, 0.0, 0.0, 1.5, 2.5])


def test_cusum_refuses_zero_sd() -> None:
    """Standardising by a zero SD is an error, not a division by zero."""
    with pytest.raises(ValueError, match="SD"):
        cusum([1.0], mean=0.0, sd=0.0, k=0.5)


def test_theil_sen_ignores_one_outlier() -> None:
    """The median of pairwise slopes keeps the slope of a line with one wild point."""
    xs = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0]
    ys = [1.0, 3.0, 5.0, 70.0, 9.0, 11.0]  # y = 1 + 2x except one point (Theil 1950, Sen 1968)
    slope, intercept = theil_sen(xs, ys)
    assert slope == pytest.approx(2.0)
    assert intercept == pytest.approx(1.0)


def test_forecast_on_linear_drift_is_within_ten_percent() -> None:
    """A +0.43 ppm/h drift at +2 ppm now reaches +5 ppm in 3/0.43 = 6.98 h (within 10 %)."""
    times_h = [-9.0, -8.0, -7.0, -6.0, -5.0, -4.0, -3.0, -2.0, -1.0, 0.0]
    jitter = [0.05, -0.04, 0.03, -0.05, 0.02, -0.03, 0.04, -0.02, 0.01, 0.0]
    values = [2.0 + 0.43 * t + j for t, j in zip(times_h, jitter, strict=True)]
    fc = forecast(times_h, values, upper=5.0, lower=-5.0)
    assert fc is not None
    expected_h = 3.0 / 0.43  # hand: (5 - 2) / 0.43
    assert fc.hours == pytest.approx(expected_h, rel=0.10)
    assert fc.slope_per_h == pytest.approx(0.43, rel=0.10)
    assert fc.limit == 5.0


def test_forecast_heads_for_the_lower_limit_on_a_falling_drift() -> None:
    """A falling drift is forecast against the lower limit."""
    times_h = [-4.0, -3.0, -2.0, -1.0, 0.0]
    values = [0.0, -1.0, -2.0, -3.0, -4.0]  # -1 ppm/h, at -4 now: -5 is 1 h away (hand)
    fc = forecast(times_h, values, upper=5.0, lower=-5.0)
    assert fc is not None
    assert fc.hours == pytest.approx(1.0)
    assert fc.limit == -5.0


@pytest.mark.parametrize(
    ("times_h", "values", "upper", "lower"),
    [
        ([-3.0, -2.0, -1.0, 0.0], [1.0, 2.0, 3.0, 4.0], 5.0, None),  # fewer than 5 points
        ([-3.0, -2.0, -1.0, 0.0], [1.0, 1.0, 1.0, 1.0], 5.0, -5.0),  # flat
        ([-3.0, -2.0, -1.0, 0.0], [4.0, 3.0, 2.0, 1.0], 5.0, None),  # heading away from the limit
        ([-3.0, -2.0, -1.0, 0.0], [4.0, 5.0, 6.0, 7.0], 5.0, None),  # already beyond it
    ],
)
def test_forecast_gives_nothing_without_an_approaching_limit(
    times_h: list[float], values: list[float], upper: float | None, lower: float | None
) -> None:
    """No forecast from too few points, a flat line, a line moving away, or a crossed limit."""
    assert forecast(times_h, values, upper=upper, lower=lower) is None


def test_forecast_gives_nothing_right_after_a_step_back_to_zero() -> None:
    """A recalibration (a step back to ~0) after a steady climb ends the forecast."""
    # Constructed: +0.5 ppm per run every 25 min, then the queued recalibration brings it to 0.3.
    times_h = [i * 25 / 60 for i in range(8)]
    values = [0.4, 0.8, 1.3, 1.9, 2.5, 3.4, 4.1, 0.3]
    assert forecast(times_h, values, upper=5.0, lower=-5.0) is None


def test_forecast_gives_nothing_for_scatter_around_zero() -> None:
    """Scatter with no real slope is not a trend to extrapolate."""
    times_h = [i * 0.5 for i in range(8)]
    values = [0.3, -0.2, 0.1, -0.4, 0.2, -0.1, 0.25, -0.3]
    assert forecast(times_h, values, upper=5.0, lower=-5.0) is None


def test_kendall_tau_b_matches_scipy_with_and_without_ties() -> None:
    """Tau-b against scipy.stats.kendalltau (variant 'b', the default); the tied example of a
    flat stretch reads 0.775, not 1.0 (Goodman-Kruskal gamma would give 1.0)."""
    from scipy.stats import kendalltau

    from watcher.rules.trend import kendall_tau_b

    flat_then_rising = [1.0, 1.0, 1.0, 1.0, 1.2, 1.4]
    times = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0]
    assert kendall_tau_b(times, flat_then_rising) == pytest.approx(0.7745966692414834)
    rng = np.random.default_rng(11)
    for _ in range(50):
        n = int(rng.integers(3, 30))
        xs = list(rng.integers(0, 6, n).astype(float))  # many ties on both sides
        ys = list(rng.integers(0, 4, n).astype(float))
        expected = kendalltau(xs, ys).statistic
        if np.isnan(expected):
            assert kendall_tau_b(xs, ys) == 0.0
        else:
            assert kendall_tau_b(xs, ys) == pytest.approx(float(expected), abs=1e-12)
