"""Expected-ion presence: an XIC over MS1 inside the ion's RT window, its apex, width and M+1/M.

Per MS1 scan the ion's peak is found as the calibrants' are (most intense centroid, or the
refined height of the local profile peak, since a +-10 ppm sum over profile data holds only 1-2
samples of a 30-40 ppm wide peak). Knows nothing of rules or alerts.
"""

from __future__ import annotations

import math
from array import array
from typing import TYPE_CHECKING

import numpy as np

from watcher.measure.ions import C13_SPACING_DA, ResolvedIon, ppm_error
from watcher.measure.peaks import find_peak, refine_apex
from watcher.records import ExpectedIonResult

if TYPE_CHECKING:
    from watcher.measure.scan import FloatArray


class XicTrace:
    """Per-scan intensity, peak m/z and M+1 intensity of one expected ion within its RT window."""

    __slots__ = ("intensity", "ion", "m1_intensity", "min_intensity", "mz", "rt_s", "window_s")

    def __init__(
        self,
        ion: ResolvedIon,
        *,
        rt_window_s: tuple[float, float] | None,
        min_intensity: float,
    ) -> None:
        self.ion = ion
        self.window_s = rt_window_s
        self.min_intensity = min_intensity
        self.rt_s = array("d")
        self.intensity = array("d")  # 0.0 where not found in the scan
        self.mz = array("d")  # NaN where not found
        self.m1_intensity = array("d")  # 0.0 where not found

    def wants(self, rt_s: float | None) -> bool:
        """Whether a scan at this RT lies in the window (a scan without RT never does)."""
        if rt_s is None or not math.isfinite(rt_s):
            return False
        return self.window_s is None or self.window_s[0] <= rt_s <= self.window_s[1]

    def add(
        self,
        rt_s: float,
        mz: FloatArray | None,
        intensity: FloatArray | None,
        *,
        profile: bool,
    ) -> None:
        """Measure one MS1 scan that lies in the window."""
        self.rt_s.append(rt_s)
        peak = None
        m1 = None
        if mz is not None and intensity is not None and mz.size:
            peak = find_peak(mz, intensity, self.ion.mz, self.ion.search_ppm, profile=profile)
            if peak is not None:
                m1_target = self.ion.mz + C13_SPACING_DA / abs(self.ion.charge)
                m1 = find_peak(mz, intensity, m1_target, self.ion.search_ppm, profile=profile)
        self.intensity.append(0.0 if peak is None else peak[1])
        self.mz.append(float("nan") if peak is None else peak[0])
        self.m1_intensity.append(0.0 if m1 is None else m1[1])

    def extend(self, later: XicTrace) -> None:
        """Append the trace of a later block of the same run (see SignalTrace.extend)."""
        self.rt_s.extend(later.rt_s)
        self.intensity.extend(later.intensity)
        self.mz.extend(later.mz)
        self.m1_intensity.extend(later.m1_intensity)

    @property
    def scans_in_window(self) -> int:
        """How many MS1 scans fell in the RT window (0: the window lies outside the run)."""
        return len(self.rt_s)

    def summary(self) -> ExpectedIonResult:
        """The ion's result; not seen in the window gives found False and None elsewhere."""
        rt = np.frombuffer(self.rt_s, dtype=np.float64)
        height = np.frombuffer(self.intensity, dtype=np.float64)
        order = np.argsort(rt, kind="stable")  # RTs need not increase in file order
        rt, height = rt[order], height[order]
        peak_mz = np.frombuffer(self.mz, dtype=np.float64)[order]
        m1 = np.frombuffer(self.m1_intensity, dtype=np.float64)[order]
        if not height.size or not height.max() > 0:
            return absent(self.ion)
        top = int(np.argmax(height))
        apex_rt_s, apex_intensity, fwhm_s = elution_peak(rt, height, top)
        return ExpectedIonResult(
            name=self.ion.name,
            mz=self.ion.mz,
            found=apex_intensity >= self.min_intensity,
            apex_rt_s=apex_rt_s,
            apex_intensity=apex_intensity,
            ppm=ppm_error(_apex_mz(peak_mz, height, top), self.ion.mz),
            fwhm_s=fwhm_s,
            m1_ratio=float(m1[top] / height[top]),
            m1_ratio_expected=self.ion.m1_ratio_expected,
        )


# A least-squares fit needs a few points across the top; fewer and the 3-point vertex is as good.
_MIN_FIT_POINTS = 5
_SIGMA_TO_FWHM = 2.0 * math.sqrt(2.0 * math.log(2.0))


def elution_peak(
    rt_s: FloatArray, height: FloatArray, top: int
) -> tuple[float, float, float | None]:
    """Apex RT, apex height and FWHM of the elution around scan ``top`` (the highest).

    A Gaussian (a parabola in log height) fitted by least squares through every scan of the
    peak at or above half the top scan's height, weighted by height (Guo, IEEE Signal Process.
    Mag. 28 (2011) 134: weighting the log fit by y^2 undoes the noise amplification of the log).
    On a densely sampled noisy peak the top scan is the maximum of many noisy samples: a curve
    forced through it (the 3-point vertex) reads the height high and the width low (0.2 s
    cycle, 30 s FWHM, 5 % noise: +11 % and -14 %); the fit through all points does not. With
    fewer than five points, or a fit that is not a peak, the 3-point vertex and the linear
    half-height crossings are used.
    """
    half = 0.5 * float(height[top])
    left = top
    while left > 0 and height[left - 1] >= half:
        left -= 1
    right = top
    while right < height.size - 1 and height[right + 1] >= half:
        right += 1
    fitted = _fit_gaussian(rt_s[left : right + 1], height[left : right + 1])
    if fitted is not None:
        return fitted
    apex_rt_s, apex_intensity = refine_apex(rt_s, height, top, wide=True)
    return apex_rt_s, apex_intensity, fwhm(rt_s, height, top, apex_intensity / 2)


def _fit_gaussian(x: FloatArray, y: FloatArray) -> tuple[float, float, float] | None:
    keep = np.isfinite(x) & np.isfinite(y) & (y > 0)
    x, y = x[keep], y[keep]
    if x.size < _MIN_FIT_POINTS:
        return None
    centre = float(x[int(np.argmax(y))])  # centred: squares of RTs near 3,000 s lose digits
    u = x - centre
    design = np.column_stack((np.ones_like(u), u, u * u)) * y[:, None]
    coeffs, *_ = np.linalg.lstsq(design, np.log(y) * y, rcond=None)
    a, b, c = (float(v) for v in coeffs)
    if not c < 0:
        return None
    u_apex = -b / (2.0 * c)
    if not float(u.min()) <= u_apex <= float(u.max()):
        return None  # the vertex of a lopsided fit outside the points is no apex
    sigma = math.sqrt(-1.0 / (2.0 * c))
    return centre + u_apex, math.exp(a - b * b / (4.0 * c)), _SIGMA_TO_FWHM * sigma


def absent(ion: ResolvedIon, *, searched: bool = True) -> ExpectedIonResult:
    """The result for an ion never seen; ``searched=False``: a run it cannot be looked for in."""
    return ExpectedIonResult(
        name=ion.name,
        mz=ion.mz,
        found=False if searched else None,
        apex_rt_s=None,
        apex_intensity=None,
        ppm=None,
        fwhm_s=None,
        m1_ratio=None,
        m1_ratio_expected=ion.m1_ratio_expected,
    )


def _apex_mz(peak_mz: FloatArray, height: FloatArray, top: int) -> float:
    """Intensity-weighted mean peak m/z over the contiguous scans at or above half the top scan.

    One scan's profile apex carries its own sampling noise (a few tenths of a ppm); the scans
    across the top of the elution measure the same ion, so their weighted mean is steadier.
    """
    half = 0.5 * float(height[top])
    left = top
    while left > 0 and height[left - 1] >= half and math.isfinite(peak_mz[left - 1]):
        left -= 1
    right = top
    while (
        right < height.size - 1 and height[right + 1] >= half and math.isfinite(peak_mz[right + 1])
    ):
        right += 1
    weights = height[left : right + 1]
    return float((peak_mz[left : right + 1] * weights).sum() / weights.sum())


def fwhm(rt_s: FloatArray, height: FloatArray, top: int, half: float) -> float | None:
    """Full width at ``half`` height around sample ``top``, linear between the crossing scans.

    None when the XIC does not fall to half height on both sides inside the window.
    """
    left = top
    while left > 0 and height[left] >= half:
        left -= 1
    right = top
    last = height.size - 1
    while right < last and height[right] >= half:
        right += 1
    if height[left] >= half or height[right] >= half:
        return None
    rt_left = _crossing(rt_s[left], height[left], rt_s[left + 1], height[left + 1], half)
    rt_right = _crossing(rt_s[right - 1], height[right - 1], rt_s[right], height[right], half)
    return rt_right - rt_left


def _crossing(x0: float, y0: float, x1: float, y1: float, level: float) -> float:
    if y1 == y0:
        return float(x0)
    return float(x0 + (level - y0) * (x1 - x0) / (y1 - y0))
