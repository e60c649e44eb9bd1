"""Calibrant drift per run on synthetic scans with known ppm offsets, drift and jitter."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.helpers.spectra import Calibrant, centroid_arrays, header, make_run, shifted
from watcher.config import Config, IonSpec
from watcher.measure import robust
from watcher.measure.calibrant import CalibrantTrace, mass_correction
from watcher.measure.ions import resolve
from watcher.measure.run import measure_scans
from watcher.records import CalibrantDrift, RunMetrics

if TYPE_CHECKING:
    from watcher.measure.scan import Scan

SILOXANE_MZ = 445.120025  # check-ions.tsv (tests/data), [(C2H6SiO)6+H]+
LEU_ENK_MZ = 556.276575  # check-ions.tsv (tests/data), YGGFL [M+H]+
SILOXANE = IonSpec(name="siloxane-445", mz=SILOXANE_MZ, search_ppm=30)
LEU_ENK = IonSpec(name="leu-enk", peptide="YGGFL", charge=1, search_ppm=30)


def _measure(scans: list[Scan], *ions: IonSpec) -> RunMetrics:
    return measure_scans(header(), scans, Config(calibrants=ions), file_name="QC_0001.mzML")


@pytest.mark.parametrize("offset_ppm", [2.0, -4.5])
@pytest.mark.parametrize(
    ("profile", "state_profile", "tol_ppm"),
    [(False, True, 0.05), (True, True, 0.3), (True, False, 0.3)],
    ids=["centroid", "profile", "profile-guessed"],
)
def test_constant_offset_recovered(
    offset_ppm: float, profile: bool, state_profile: bool, tol_ppm: float
) -> None:
    """A constant calibrant offset comes back as median_ppm (0.05 ppm centroid, 0.3 profile)."""
    scans = make_run(
        duration_s=120,
        calibrants=[Calibrant(SILOXANE_MZ, ppm=lambda _rt: offset_ppm)],
        profile=profile,
        state_profile=state_profile,
        intensity_jitter=0.02 if profile else 0.0,
    )
    drift = _measure(scans, SILOXANE).calibrants[0]
    # synthetic ground truth: every MS1 scan holds the calibrant shifted by offset_ppm
    assert drift.median_ppm == pytest.approx(offset_ppm, abs=tol_ppm)
    assert drift.found_fraction == 1.0
    assert drift.scans_found == 60
    assert drift.median_intensity == pytest.approx(2.0e5, rel=0.05)
    assert drift.mad_ppm == pytest.approx(0.0, abs=tol_ppm)
    assert drift.slope_ppm_per_h is not None
    # over the 2-min run the fitted drift stays within the ppm tolerance
    assert abs(drift.slope_ppm_per_h) * 120 / 3600 < tol_ppm


@pytest.mark.parametrize(("profile", "tol_ppm"), [(False, 0.05), (True, 0.3)])
def test_linear_drift_slope_and_median(profile: bool, tol_ppm: float) -> None:
    """A drift of +6 ppm/h from -1 ppm gives that slope (within 5 %) and the mid-run median."""
    slope_ppm_per_h = 6.0
    scans = make_run(
        duration_s=1800,
        cycle_s=2.0,
        ms2_per_cycle=0,
        calibrants=[Calibrant(SILOXANE_MZ, ppm=lambda rt: -1.0 + slope_ppm_per_h * rt / 3600)],
        profile=profile,
        noise_peaks=10,
        intensity_jitter=0.02 if profile else 0.0,
    )
    drift = _measure(scans, SILOXANE).calibrants[0]
    rts = np.array([s.rt_s for s in scans if s.ms_level == 1], dtype=np.float64)
    true_ppm = -1.0 + slope_ppm_per_h * rts / 3600
    # synthetic ground truth: ppm is linear in RT, so its median is the median of the truth
    assert drift.median_ppm == pytest.approx(float(np.median(true_ppm)), abs=tol_ppm)
    assert drift.slope_ppm_per_h == pytest.approx(slope_ppm_per_h, rel=0.05)
    assert drift.p05_ppm == pytest.approx(float(np.percentile(true_ppm, 5)), abs=tol_ppm)
    assert drift.p95_ppm == pytest.approx(float(np.percentile(true_ppm, 95)), abs=tol_ppm)


def test_jitter_spread_statistics() -> None:
    """Alternating +0.5/-0.5 ppm around +1 ppm gives MAD 0.5 and p05/p95 at 0.5/1.5 ppm."""
    scans = make_run(
        duration_s=200,
        calibrants=[
            Calibrant(SILOXANE_MZ, ppm=lambda rt: 1.0 + (0.5 if int(rt) % 4 < 2 else -0.5))
        ],
    )
    drift = _measure(scans, SILOXANE).calibrants[0]
    # synthetic ground truth: half the scans at 1.5 ppm, half at 0.5 ppm
    assert drift.mad_ppm == pytest.approx(0.5, abs=1e-6)
    assert drift.p05_ppm == pytest.approx(0.5, abs=1e-6)
    assert drift.p95_ppm == pytest.approx(1.5, abs=1e-6)


def test_calibrant_missing_from_half_the_scans() -> None:
    """A calibrant present in half the MS1 scans has found_fraction 0.5."""
    scans = make_run(duration_s=40, calibrants=[Calibrant(SILOXANE_MZ, ppm=lambda _rt: 1.0)])
    ms1 = [s for s in scans if s.ms_level == 1]
    for scan in ms1[::2]:
        assert scan.mz is not None
        assert scan.intensity is not None
        keep = np.abs(scan.mz - SILOXANE_MZ) > 0.1
        scan.mz, scan.intensity = scan.mz[keep], scan.intensity[keep]
    drift = _measure(scans, SILOXANE).calibrants[0]
    # synthetic ground truth: the calibrant peak removed from every other MS1 scan
    assert drift.found_fraction == pytest.approx(0.5)
    assert drift.scans_found == len(ms1) // 2


def test_absent_calibrant_gives_nulls() -> None:
    """A calibrant never seen has None statistics and found_fraction 0."""
    scans = make_run(duration_s=40, calibrants=[Calibrant(LEU_ENK_MZ)])
    drift = _measure(scans, SILOXANE).calibrants[0]
    assert drift.median_ppm is None
    assert drift.mad_ppm is None
    assert drift.slope_ppm_per_h is None
    assert drift.found_fraction == 0.0
    assert drift.scans_found == 0


def test_negative_calibrant_skips_positive_scans() -> None:
    """A negative-mode calibrant is not searched in positive-polarity scans."""
    scans = make_run(duration_s=20, calibrants=[Calibrant(SILOXANE_MZ)])
    negative = IonSpec(name="neg", mz=SILOXANE_MZ, charge=-1, search_ppm=30)
    drift = _measure(scans, negative).calibrants[0]
    assert str(drift.found_fraction) == "nan"  # never searched: not measured
    assert drift.median_ppm is None


def test_two_calibrants_give_mass_correction() -> None:
    """Offsets of +1 ppm at m/z 445 and +3 ppm at m/z 556 give the line through both."""
    scans = make_run(
        duration_s=60,
        calibrants=[
            Calibrant(SILOXANE_MZ, ppm=lambda _rt: 1.0),
            Calibrant(LEU_ENK_MZ, ppm=lambda _rt: 3.0),
        ],
    )
    metrics = _measure(scans, SILOXANE, LEU_ENK)
    fit = metrics.mass_correction
    assert fit is not None
    slope = 2.0 / (LEU_ENK_MZ - SILOXANE_MZ)
    # algebra: the line through (445.12, 1) and (556.28, 3)
    assert fit.slope_ppm_per_mz == pytest.approx(slope, rel=1e-3)
    assert fit.intercept_ppm == pytest.approx(1.0 - slope * SILOXANE_MZ, abs=0.01)
    assert fit.calibrants_used == 2


def _drift(mz: float, median_ppm: float | None) -> CalibrantDrift:
    return CalibrantDrift(
        name=f"c{mz}",
        mz=mz,
        median_ppm=median_ppm,
        mad_ppm=None,
        p05_ppm=None,
        p95_ppm=None,
        found_fraction=1.0,
        median_intensity=None,
        slope_ppm_per_h=None,
    )


def test_mass_correction_least_squares_matches_numpy() -> None:
    """Three calibrants: the fit equals numpy.polyfit's degree-1 least squares."""
    points = [(200.0, 1.0), (445.0, 2.5), (900.0, 2.0)]
    fit = mass_correction([_drift(mz, ppm) for mz, ppm in points])
    assert fit is not None
    # numpy.polyfit (reference least-squares implementation)
    slope, intercept = np.polyfit([p[0] for p in points], [p[1] for p in points], 1)
    assert fit.slope_ppm_per_mz == pytest.approx(slope)
    assert fit.intercept_ppm == pytest.approx(intercept)


def test_mass_correction_needs_two_found_calibrants() -> None:
    """One found calibrant (the other never found) gives no correction."""
    assert mass_correction([_drift(445.0, 2.0), _drift(556.0, None)]) is None


def test_theil_sen_ignores_outliers_and_subsamples_long_series() -> None:
    """Theil-Sen keeps the true slope with 10 % wild points and on 5000 points."""
    x = np.arange(5000, dtype=np.float64)
    y = 0.002 * x + 1.0
    y[::10] += 50.0  # wild points
    # synthetic ground truth: slope 0.002 with 10 % outliers (Theil-Sen breakdown ~29 %)
    assert robust.theil_sen_slope(x, y) == pytest.approx(0.002, rel=0.01)
    assert robust.theil_sen_slope(x[:1], y[:1]) is None


@settings(max_examples=30, deadline=None)
@given(
    offsets=st.lists(st.floats(-8.0, 8.0), min_size=3, max_size=25),
    k_ppm=st.floats(-10.0, 10.0),
)
def test_shifting_every_peak_moves_median_by_k(offsets: list[float], k_ppm: float) -> None:
    """Shifting every peak by k ppm moves median_ppm by k (invariant)."""
    ion = resolve(SILOXANE)

    def median_for(shift_ppm: float) -> float | None:
        trace = CalibrantTrace(ion)
        for i, off in enumerate(offsets):
            mz, intensity = centroid_arrays(
                [(shifted(shifted(SILOXANE_MZ, off), shift_ppm), 1e5), (300.0 + i, 5e4)]
            )
            trace.add(float(i), mz, intensity, profile=False)
        return trace.summary().median_ppm

    base, moved = median_for(0.0), median_for(k_ppm)
    assert base is not None
    assert moved is not None
    # invariant (STYLE.md section 8); second-order term offset x k x 1e-6 is below 1e-4 ppm
    assert moved - base == pytest.approx(k_ppm, abs=1e-3)
