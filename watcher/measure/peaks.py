"""Find one peak near a target m/z in a spectrum, and refine an apex between sampled points.

Centroid spectra: the most intense point in the window. Profile spectra: the local maximum,
refined by 3-point Gaussian interpolation (a parabola through log intensities; the side points
are the outermost samples above half height, see ``refine_apex``). Pure numpy; no knowledge of
ions or runs.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from watcher.measure.robust import median_of

if TYPE_CHECKING:
    from watcher.measure.scan import FloatArray

# Profile spectra sample each peak every few ppm; centroid lists sit hundreds of ppm apart.
_PROFILE_SPACING_PPM = 20.0


def looks_profile(mz: FloatArray) -> bool:
    """Guess profile mode from point spacing: median neighbour spacing below 20 ppm of m/z."""
    if mz.size < 8:
        return False
    sample = mz[: min(mz.size, 4096)]
    spacing_ppm = np.diff(sample) / sample[1:] * 1e6
    return median_of(spacing_ppm) < _PROFILE_SPACING_PPM


def find_peak(
    mz: FloatArray,
    intensity: FloatArray,
    mz_target: float,
    tol_ppm: float,
    *,
    profile: bool,
) -> tuple[float, float] | None:
    """The peak of the ion at ``mz_target``: its apex m/z and height within +-``tol_ppm``.

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
    window = intensity[lo:hi]
    finite = np.isfinite(window)
    if not finite.all():
        # A NaN would win argmax (and hide a real peak beside it); NaN/inf are no peaks.
        window = np.where(finite, window, -np.inf)
    top = lo + int(np.argmax(window))
    if not (np.isfinite(intensity[top]) and np.isfinite(mz[top]) and intensity[top] > 0):
        return None
    if not profile:
        return float(mz[top]), float(intensity[top])
    return _profile_peak(mz, intensity, mz_target, half_width, lo, hi)


def _profile_peak(
    mz: FloatArray, intensity: FloatArray, mz_target: float, half_width: float, lo: int, hi: int
) -> tuple[float, float] | None:
    """The highest local maximum whose refined apex lies inside the window.

    The highest point in the window may be the flank of a stronger peak just outside it (a
    calibrant beside a 50x stronger ion 35 ppm away): climbing from there would leave the window
    and lose the calibrant, though its own local maximum sits inside. So every local maximum from
    one sample before the window to one after it (a top sample just past the edge can still
    refine to an apex inside) is a candidate, highest first.
    """
    start, stop = max(lo - 1, 0), min(hi + 1, mz.size)
    y = np.where(np.isfinite(intensity[start:stop]), intensity[start:stop], -np.inf)
    # Neighbours outside the slice: the samples beyond it (or nothing at the array's ends).
    before = intensity[start - 1] if start > 0 else -np.inf
    after = intensity[stop] if stop < mz.size else -np.inf
    padded = np.concatenate(([before], y, [after]))
    padded = np.where(np.isfinite(padded), padded, -np.inf)
    middle = padded[1:-1]
    is_max = (middle > 0) & (middle >= padded[:-2]) & (middle >= padded[2:])
    for k in np.flatnonzero(is_max)[np.argsort(-middle[is_max], kind="stable")]:
        apex_mz, apex_intensity = refine_apex(mz, intensity, start + int(k), wide=True)
        if abs(apex_mz - mz_target) <= half_width:
            return apex_mz, apex_intensity
    return None


def refine_apex(x: FloatArray, y: FloatArray, i: int, *, wide: bool = False) -> tuple[float, float]:
    """Apex position and height from sample ``i`` and one point on either side of it.

    A parabola through the log intensities of three points is exact for a Gaussian peak, which
    ToF and Orbitrap profile peaks and chromatographic peaks approximate; the top sample alone
    can be off by half the spacing (1-3 ppm in m/z). With ``wide`` the side points are the
    outermost contiguous samples still at or above half the top height, short of a valley (the
    direct neighbours when sampling is coarse, or when a neighbouring peak's flank reaches the
    half-height points): still exact for a Gaussian, but on a densely sampled peak the three top
    samples differ by a percent or two, so point noise of that size would swing the
    apex by a ppm; points near half height pin the curvature down. Falls back to a parabola
    through the raw intensities when a side point is not positive, and to the sample itself at
    an array edge or when the three points are not concave.
    """
    last = x.size - 1
    if i <= 0 or i >= last or not y[i] > 0:
        return float(x[i]), float(y[i])
    left, right = i - 1, i + 1
    if wide:
        half = 0.5 * float(y[i])
        # Stop at a valley too: past it the points belong to a neighbouring peak (a calibrant
        # beside a stronger ion), whose flank would bend the fit. A rise of less than 10 % of
        # the top over the lowest point so far is point noise, not a valley.
        rise = 0.1 * float(y[i])
        low = float(y[left])
        while left > 0 and half <= y[left - 1] <= low + rise:
            left -= 1
            low = min(low, float(y[left]))
        valley = left > 0 and y[left - 1] > low + rise
        low = float(y[right])
        while right < last and half <= y[right + 1] <= low + rise:
            right += 1
            low = min(low, float(y[right]))
        if valley or (right < last and y[right + 1] > low + rise):
            # A neighbour's flank already lifts the points towards half height: the direct
            # neighbours are the least touched by it.
            left, right = i - 1, i + 1
    return _vertex(
        float(x[left]), float(y[left]), float(x[i]), float(y[i]), float(x[right]), float(y[right])
    )


def _vertex(
    x0: float, y0: float, x1: float, y1: float, x2: float, y2: float
) -> tuple[float, float]:
    """Vertex of the (log-)parabola through three points, centred on the middle one."""
    if not all(math.isfinite(v) for v in (x0, y0, x2, y2)):
        return x1, y1  # a NaN/inf side point carries no shape
    gaussian = y0 > 0 and y2 > 0
    v0, v1, v2 = (math.log(y0), math.log(y1), math.log(y2)) if gaussian else (y0, y1, y2)
    # Centre on x1: m/z values near 1000 squared would lose the sub-mDa differences.
    h0, h2 = x1 - x0, x2 - x1
    if h0 <= 0 or h2 <= 0:
        return x1, y1
    a = ((v0 - v1) / h0 + (v2 - v1) / h2) / (h0 + h2)
    if a >= 0:  # not concave: no better estimate than the top sample
        return x1, y1
    b = (v2 - v1) / h2 - a * h2
    u = min(max(-b / (2 * a), -h0), h2)
    top = v1 + a * u * u + b * u
    return x1 + u, math.exp(top) if gaussian else top
