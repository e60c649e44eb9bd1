"""Robust baselines (median, 1.4826 x MAD) and the lab's fixed mean and SD."""

from __future__ import annotations

import statistics

import pytest
from hypothesis import given
from hypothesis import strategies as st

from watcher.config import BaselineSpec
from watcher.rules.baseline import MAD_TO_SD, from_spec, robust_centre_sd


def test_robust_centre_and_sd_by_hand() -> None:
    """Median 5, |x - 5| = 4,1,0,1,2 -> MAD 1 -> SD 1.4826 (normal consistency factor)."""
    # Hand computation; 1.4826 = 1/Phi^-1(3/4), common practice for MAD-based SDs.
    centre, sd = robust_centre_sd([1.0, 4.0, 5.0, 6.0, 7.0])
    assert centre == 5.0
    assert sd == pytest.approx(1.4826)


def test_robust_baseline_shrugs_off_one_bad_run() -> None:
    """One run at 10 x the rest moves the robust centre far less than the mean."""
    values = [1.0e6, 1.02e6, 0.98e6, 1.01e6, 0.99e6, 1.0e7]
    centre, sd = robust_centre_sd(values)
    assert centre == pytest.approx(1.005e6)
    assert statistics.mean(values) == pytest.approx(2.5e6)  # the plain mean is dragged away
    assert sd < 0.05e6


def test_mad_factor_estimates_normal_sd() -> None:
    """1.4826 x MAD of a large normal sample is close to its SD."""
    # 1/Phi^-1(0.75) from the standard library NormalDist; the factor is common practice.
    quantiles = statistics.NormalDist(mu=0.0, sigma=2.0).inv_cdf
    sample = [quantiles((i + 0.5) / 2001) for i in range(2001)]
    _, sd = robust_centre_sd(sample)
    assert sd == pytest.approx(2.0, rel=0.01)
    assert pytest.approx(1 / statistics.NormalDist().inv_cdf(0.75), rel=1e-4) == MAD_TO_SD


def test_needs_min_runs() -> None:
    """Fewer accepted runs than min_runs gives no baseline at all."""
    spec = BaselineSpec(runs=20, min_runs=5)
    assert from_spec(spec, [1.0, 2.0, 3.0, 4.0]) is None
    baseline = from_spec(spec, [1.0, 2.0, 3.0, 4.0, 5.0])
    assert baseline is not None
    assert baseline.centre == 3.0
    assert baseline.n_runs == 5


def test_only_the_last_runs_count() -> None:
    """The baseline window is the last `runs` accepted values (oldest first input)."""
    baseline = from_spec(BaselineSpec(runs=3, min_runs=3), [100.0, 100.0, 1.0, 2.0, 3.0])
    assert baseline is not None
    assert baseline.centre == 2.0
    assert baseline.n_runs == 3


def test_fixed_mean_and_sd_need_no_history() -> None:
    """A lab-established mean and SD are used as they are, without any runs."""
    baseline = from_spec(BaselineSpec(mean=0.5, sd=1.2), [])
    assert baseline is not None
    assert (baseline.centre, baseline.sd, baseline.is_fixed) == (0.5, 1.2, True)


def test_fixed_mean_with_robust_sd() -> None:
    """A fixed mean alone keeps the robust SD from history."""
    baseline = from_spec(BaselineSpec(mean=0.0, min_runs=3), [1.0, 4.0, 5.0, 6.0, 7.0])
    assert baseline is not None
    assert baseline.centre == 0.0
    assert baseline.sd == pytest.approx(1.4826)
    assert not baseline.is_fixed


@given(
    st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=1, max_size=40),
    st.floats(-1e3, 1e3, allow_nan=False),
    st.floats(0.01, 100.0, allow_nan=False),
)
def test_robust_statistics_follow_shift_and_scale(
    values: list[float], shift: float, scale: float
) -> None:
    """median(a x + c) = a median(x) + c and MAD-SD(a x + c) = a MAD-SD(x) (equivariance)."""
    centre, sd = robust_centre_sd(values)
    centre2, sd2 = robust_centre_sd([scale * v + shift for v in values])
    assert centre2 == pytest.approx(scale * centre + shift, rel=1e-9, abs=1e-6)
    assert sd2 == pytest.approx(scale * sd, rel=1e-9, abs=1e-6)
