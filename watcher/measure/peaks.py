"""Find one peak near a target m/z in a spectrum, and refine an apex between sampled points.

Centroid spectra: the most intense point in the window. Profile spectra: the local maximum,
refined by 3-point Gaussian interpolation. Pure numpy; no knowledge of ions or runs.
"""

from __future__ import annotations

import math

import numpy as np

from watcher.measure.scan import FloatArray

# Profile spectra sample each peak every few ppm; centroid lists sit hundreds of ppm apart.
_PROFILE_SPACING_PPM = 20.0


def looks_profile(mz: FloatArray) -> bool:
    """Guess profile mode from point spacing: median neighbour spacing below 20 ppm of m/z."""
    if mz.size < 8:
        return False
    sample = mz[: min(mz.size, 4096)]
    spacing_ppm = np.diff(sample) / sample[1:] * 1e6
    return bool(np.median(spacing_ppm) < _PROFILE_SPACING_PPM)


def find_peak(
    mz: FloatArray,
    intensity: FloatArray,
    mz_target: float,
    tol_ppm: float,
    *,
    profile: bool,
) -> tuple[float, float] | None:
    """The peak nearest in kind to ``mz_target`` within +-``tol_ppm``.

    Args:
        mz: ascending m/z values of one spectrum.
        intensity: intensities, same length.
        mz_target: theoretical m/z.
        tol_ppm: half-width of the search window in ppm of ``mz_target``.
        profile: True for profile (continuum) data, False for centroids.

    Returns:
        (mz_apex, intensity_apex), or None when the window holds no positive point (centroid)
        or no local maximum whose refined apex lies inside the window (profile).
    """
    half_width = mz_target * tol_ppm * 1e-6
    lo = int(np.searchsorted(mz, mz_target - half_width, side="left"))
    hi = int(np.searchsorted(mz, mz_target + half_width, side="right"))
    if hi <= lo:
        return None
    top = lo + int(np.argmax(intensity[lo:hi]))
    if not intensity[top] > 0:
        return None
    if not profile:
        return float(mz[top]), float(intensity[top])
    # The highest point in the window may sit on the flank of a peak whose top sample lies just
    # outside it: climb to the local maximum, then accept it if the refined apex is inside.
    last = mz.size - 1
    while top < last and intensity[top + 1] > intensity[top]:
        top += 1
    while top > 0 and intensity[top - 1] > intensity[top]:
        top -= 1
    apex_mz, apex_intensity = refine_apex(mz, intensity, top)
    if abs(apex_mz - mz_target) > half_width:
        return None
    return apex_mz, apex_intensity


def refine_apex(x: FloatArray, y: FloatArray, i: int) -> tuple[float, float]:
    """Apex position and height from sample ``i`` and its two neighbours.

    A parabola through the log intensities is exact for a Gaussian peak, which ToF and
    Orbitrap profile peaks and chromatographic peaks approximate; the top sample alone can be
    off by half the spacing (1-3 ppm in m/z). Falls back to a parabola through the raw
    intensities when a neighbour is not positive, and to the sample itself at an array edge or
    on a flat top.
    """
    if i <= 0 or i >= x.size - 1:
        return float(x[i]), float(y[i])
    y0, y1, y2 = float(y[i - 1]), float(y[i]), float(y[i + 1])
    if y1 <= 0 or y0 > y1 or y2 > y1:
        return float(x[i]), y1
    gaussian = y0 > 0 and y2 > 0
    if gaussian:
        y0, y1, y2 = math.log(y0), math.log(y1), math.log(y2)
    # Centre on x[i]: m/z values near 1000 squared would lose the sub-mDa differences.
    h0 = float(x[i] - x[i - 1])
    h2 = float(x[i + 1] - x[i])
    if h0 <= 0 or h2 <= 0:
        return float(x[i]), float(y[i])
    a = ((y0 - y1) / h0 + (y2 - y1) / h2) / (h0 + h2)
    if a >= 0:  # three collinear points: a flat top has no better estimate than the sample
        return float(x[i]), float(y[i])
    b = (y2 - y1) / h2 - a * h2
    u = -b / (2 * a)
    top = y1 - b * b / (4 * a)
    u = min(max(u, -h0), h2)
    return float(x[i]) + u, math.exp(top) if gaussian else top
