"""Peak finding near a target m/z on centroid and profile spectra, and apex refinement."""

from __future__ import annotations

import numpy as np
import pytest

from tests.helpers.spectra import centroid_arrays, profile_arrays, shifted
from watcher.measure.ions import ppm_error
from watcher.measure.peaks import find_peak, looks_profile, refine_apex

SILOXANE_MZ = 445.120025  # check-ions.tsv (tests/data), [(C2H6SiO)6+H]+


def test_centroid_takes_most_intense_point_in_window() -> None:
    """Centroid data: the most intense point within the window wins, not the nearest."""
    mz, intensity = centroid_arrays(
        [(shifted(SILOXANE_MZ, -3.0), 5e3), (shifted(SILOXANE_MZ, 8.0), 4e4), (445.5, 9e5)]
    )
    peak = find_peak(mz, intensity, SILOXANE_MZ, 20.0, profile=False)
    assert peak is not None
    # synthetic ground truth: the 4e4 peak placed at +8 ppm
    assert ppm_error(peak[0], SILOXANE_MZ) == pytest.approx(8.0, abs=1e-6)
    assert peak[1] == 4e4


def test_centroid_outside_window_is_none() -> None:
    """A peak 25 ppm away is not found with a 20 ppm window."""
    mz, intensity = centroid_arrays([(shifted(SILOXANE_MZ, 25.0), 1e5)])
    assert find_peak(mz, intensity, SILOXANE_MZ, 20.0, profile=False) is None
    assert find_peak(mz, intensity, SILOXANE_MZ, 30.0, profile=False) is not None


@pytest.mark.parametrize("phase", [0.0, 0.13, 0.37, 0.5, 0.81])
@pytest.mark.parametrize("offset_ppm", [-4.5, 0.0, 2.0, 9.0])
def test_profile_gaussian_apex_between_samples(phase: float, offset_ppm: float) -> None:
    """Profile data: the Gaussian 3-point apex recovers the true m/z and height between samples."""
    true_mz = shifted(SILOXANE_MZ, offset_ppm)
    mz, intensity = profile_arrays([(true_mz, 3e5)], phase=phase)
    peak = find_peak(mz, intensity, SILOXANE_MZ, 30.0, profile=True)
    assert peak is not None
    # synthetic ground truth: a pure Gaussian, for which the log-parabola is exact
    assert ppm_error(peak[0], true_mz) == pytest.approx(0.0, abs=0.01)
    assert peak[1] == pytest.approx(3e5, rel=1e-4)


def test_wide_side_points_steady_the_apex_under_point_noise() -> None:
    """With 2 % point noise, half-height side points give a far steadier apex than neighbours."""
    rng = np.random.default_rng(21)
    true_mz = shifted(SILOXANE_MZ, 2.0)
    mz, clean = profile_arrays([(true_mz, 3e5)], spacing_ppm=3.0)
    wide_ppm, narrow_ppm = [], []
    for _ in range(200):
        noisy = clean * (1.0 + 0.02 * rng.standard_normal(clean.size))
        top = int(np.argmax(noisy))
        wide_ppm.append(ppm_error(refine_apex(mz, noisy, top, wide=True)[0], true_mz))
        narrow_ppm.append(ppm_error(refine_apex(mz, noisy, top)[0], true_mz))
    # synthetic ground truth: the same Gaussian (35 ppm FWHM, 3 ppm sampling) under noise
    assert float(np.median(wide_ppm)) == pytest.approx(0.0, abs=0.3)
    assert float(np.std(wide_ppm)) < 0.5 * float(np.std(narrow_ppm))


def test_profile_top_sample_alone_would_be_off() -> None:
    """Without refinement the top sample is off by up to half a step; refinement fixes it."""
    true_mz = shifted(SILOXANE_MZ, 2.0)
    mz, intensity = profile_arrays([(true_mz, 3e5)], phase=0.5, spacing_ppm=4.0)
    top = int(np.argmax(intensity))
    # synthetic ground truth: samples 4 ppm apart with the apex halfway between two of them
    assert abs(ppm_error(float(mz[top]), true_mz)) == pytest.approx(2.0, abs=0.01)
    peak = find_peak(mz, intensity, SILOXANE_MZ, 30.0, profile=True)
    assert peak is not None
    assert abs(ppm_error(peak[0], true_mz)) < 0.01


def test_profile_apex_just_outside_window_is_rejected() -> None:
    """A profile peak whose refined apex lies outside the window is not taken from its flank."""
    true_mz = shifted(SILOXANE_MZ, 24.0)
    mz, intensity = profile_arrays([(true_mz, 3e5)])
    assert find_peak(mz, intensity, SILOXANE_MZ, 20.0, profile=True) is None
    assert find_peak(mz, intensity, SILOXANE_MZ, 30.0, profile=True) is not None


def test_profile_apex_inside_window_with_top_sample_outside() -> None:
    """The climb to the local maximum finds a peak whose top sample sits just past the edge."""
    true_mz = shifted(SILOXANE_MZ, 19.5)
    mz, intensity = profile_arrays([(true_mz, 3e5)], phase=0.9, spacing_ppm=4.0)
    peak = find_peak(mz, intensity, SILOXANE_MZ, 20.0, profile=True)
    assert peak is not None
    assert ppm_error(peak[0], true_mz) == pytest.approx(0.0, abs=0.01)


def test_refine_falls_back_to_parabola_on_zero_neighbour() -> None:
    """With a zero neighbour the raw-intensity parabola is used: vertex of 0, 4, 2 at x=1.3."""
    x = np.array([0.0, 1.0, 2.0])
    y = np.array([0.0, 4.0, 2.0])
    apex_x, apex_y = refine_apex(x, y, 1)
    # parabola through (0,0), (1,4), (2,2): y = -3x^2 + 7x, vertex x = 7/6, y = 49/12 (algebra)
    assert apex_x == pytest.approx(7 / 6)
    assert apex_y == pytest.approx(49 / 12)


def test_refine_exact_for_gaussian_on_uneven_spacing() -> None:
    """The log-parabola through three uneven samples of a Gaussian returns its exact apex."""
    x = np.array([9.1, 10.2, 12.0])
    y = 7.0 * np.exp(-0.5 * ((x - 10.7) / 1.3) ** 2)
    apex_x, apex_y = refine_apex(x, y, 1)
    # algebra: ln of a Gaussian is a parabola, so three points determine it exactly
    assert apex_x == pytest.approx(10.7)
    assert apex_y == pytest.approx(7.0)


def test_refine_at_array_edge_returns_sample() -> None:
    """An apex on the first or last sample cannot be refined and is returned as is."""
    x = np.array([1.0, 2.0, 3.0])
    y = np.array([5.0, 3.0, 1.0])
    assert refine_apex(x, y, 0) == (1.0, 5.0)


def test_empty_or_zero_window_is_none() -> None:
    """An empty spectrum, or a window holding only zero intensities, gives no peak."""
    empty = np.empty(0)
    assert find_peak(empty, empty, SILOXANE_MZ, 20.0, profile=False) is None
    mz = np.array([SILOXANE_MZ])
    assert find_peak(mz, np.zeros(1), SILOXANE_MZ, 20.0, profile=True) is None


def test_looks_profile_tells_sampled_from_centroided() -> None:
    """Point spacing tells profile (a few ppm) from centroid (hundreds of ppm) spectra."""
    rng = np.random.default_rng(3)
    centres = np.sort(rng.uniform(100.0, 1000.0, 300))
    prof_mz, _ = profile_arrays([(float(c), 1e4) for c in centres])
    cent_mz, _ = centroid_arrays([(float(c), 1e4) for c in centres])
    # common practice: profile peaks are sampled many times across a ~30 ppm width
    assert looks_profile(prof_mz)
    assert not looks_profile(cent_mz)


def test_calibrant_beside_a_stronger_ion_is_found() -> None:
    """Leu-enkephalin [M+H]+ 556.276575 (check-ions.tsv) at +1.0 ppm, resolving power 60,000
    (FWHM = m/z / R), with a 50x stronger ion 35 ppm above it: the window's highest point is
    that ion's flank, but the calibrant's own local maximum lies inside and is the answer."""
    leu_enk_mz = 556.276575
    fwhm_ppm = 1e6 / 60_000
    true_mz = shifted(leu_enk_mz, 1.0)
    mz, intensity = profile_arrays(
        [(true_mz, 1e5), (shifted(leu_enk_mz, 35.0), 5e6)], fwhm_ppm=fwhm_ppm, spacing_ppm=2.0
    )
    window = np.abs(mz - leu_enk_mz) <= leu_enk_mz * 20e-6
    assert intensity[window].max() > 1e5  # the flank outshines the calibrant inside the window
    peak = find_peak(mz, intensity, leu_enk_mz, 20.0, profile=True)
    assert peak is not None
    assert ppm_error(peak[0], true_mz) == pytest.approx(0.0, abs=0.05)
    assert peak[1] == pytest.approx(1e5, rel=0.01)
