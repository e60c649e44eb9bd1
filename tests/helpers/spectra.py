"""Builds in-memory Scan objects with exact ground truth: centroid or profile Gaussian peaks.

Every peak the tests search for is placed where the test says (m/z shifted by a known ppm, RT
elution as a known Gaussian, M+1 at a known ratio); random background peaks are kept at least
200 ppm away from every such peak so they cannot move an apex. Seeded, so runs are repeatable.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from watcher.measure.scan import FloatArray, RunHeader, Scan

if TYPE_CHECKING:
    from collections.abc import Callable, Sequence

C13_SPACING_DA = 1.0033548378  # 13C - 12C (NIST atomic masses, as tabulated in pyteomics)
SIGMA_PER_FWHM = 1.0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))  # Gaussian: FWHM = 2.3548 sigma


@dataclass(frozen=True)
class Calibrant:
    """A lock-mass ion present in every MS1 scan at ``intensity``, shifted by ``ppm(rt_s)``."""

    mz: float
    intensity: float = 2.0e5
    ppm: Callable[[float], float] = field(default=lambda _rt: 0.0)


@dataclass(frozen=True)
class Analyte:
    """An ion eluting as a Gaussian in RT, with its M+1 peak at ``m1_ratio`` of its height."""

    mz: float
    apex_rt_s: float
    fwhm_rt_s: float
    height: float
    charge: int = 1
    m1_ratio: float = 0.0
    ppm: float = 0.0

    def height_at(self, rt_s: float) -> float:
        sigma_s = self.fwhm_rt_s * SIGMA_PER_FWHM
        return self.height * math.exp(-0.5 * ((rt_s - self.apex_rt_s) / sigma_s) ** 2)


def centroid_arrays(peaks: Sequence[tuple[float, float]]) -> tuple[FloatArray, FloatArray]:
    """(mz, intensity) arrays of centroid peaks, sorted by m/z; zero-height peaks dropped."""
    kept = sorted((mz, i) for mz, i in peaks if i > 0)
    mz = np.array([p[0] for p in kept], dtype=np.float64)
    intensity = np.array([p[1] for p in kept], dtype=np.float64)
    return mz, intensity


def profile_arrays(
    peaks: Sequence[tuple[float, float]],
    *,
    fwhm_ppm: float = 35.0,
    spacing_ppm: float = 4.0,
    phase: float = 0.37,
) -> tuple[FloatArray, FloatArray]:
    """Profile (continuum) arrays: each peak a Gaussian of ``fwhm_ppm``, sampled every
    ``spacing_ppm`` on a grid offset by ``phase`` of a step, so the true apex lies between samples.

    Points are kept within 4 sigma of each peak; every point carries the sum of all Gaussians.
    """
    points: list[FloatArray] = []
    for mz0, height in peaks:
        if height <= 0:
            continue
        step = mz0 * spacing_ppm * 1e-6
        sigma = mz0 * fwhm_ppm * 1e-6 * SIGMA_PER_FWHM
        k = np.arange(-math.ceil(4 * sigma / step), math.ceil(4 * sigma / step) + 1)
        points.append(mz0 + (k + phase) * step)
    if not points:
        return np.empty(0), np.empty(0)
    mz = np.unique(np.concatenate(points))
    intensity = np.zeros_like(mz)
    for mz0, height in peaks:
        if height <= 0:
            continue
        sigma = mz0 * fwhm_ppm * 1e-6 * SIGMA_PER_FWHM
        near = np.abs(mz - mz0) < 6 * sigma
        intensity[near] += height * np.exp(-0.5 * ((mz[near] - mz0) / sigma) ** 2)
    return mz, intensity


def shifted(mz: float, ppm: float) -> float:
    """``mz`` moved by ``ppm`` parts per million."""
    return mz * (1.0 + ppm * 1e-6)


def make_run(
    *,
    duration_s: float = 600.0,
    cycle_s: float = 2.0,
    ms2_per_cycle: int = 2,
    calibrants: Sequence[Calibrant] = (),
    analytes: Sequence[Analyte] = (),
    profile: bool = False,
    state_profile: bool = True,
    noise_peaks: int = 60,
    seed: int = 7,
    rt_start_s: float = 1.0,
    intensity_jitter: float = 0.0,
    polarity: int = 1,
) -> list[Scan]:
    """A DDA-like run: an MS1 scan every ``cycle_s`` followed by ``ms2_per_cycle`` MS2 scans.

    Args:
        state_profile: when False, ``Scan.is_profile`` is left None (readers that cannot tell).
        noise_peaks: random background peaks per MS1 scan (100-1000 m/z, 1e3-2e4 counts).
        intensity_jitter: relative SD of multiplicative noise on every MS1 point (e.g. 0.03).
    """
    rng = np.random.default_rng(seed)
    targets = [c.mz for c in calibrants]
    for a in analytes:
        targets += [a.mz, a.mz + C13_SPACING_DA / abs(a.charge)]
    scans: list[Scan] = []
    index = 0
    n_cycles = int(duration_s // cycle_s)
    for cycle in range(n_cycles):
        rt_s = rt_start_s + cycle * cycle_s
        peaks: list[tuple[float, float]] = []
        for cal in calibrants:
            peaks.append((shifted(cal.mz, cal.ppm(rt_s)), cal.intensity))
        for a in analytes:
            h = a.height_at(rt_s)
            if h < 1.0:
                continue
            mz_obs = shifted(a.mz, a.ppm)
            peaks.append((mz_obs, h))
            peaks.append((mz_obs + C13_SPACING_DA / abs(a.charge), h * a.m1_ratio))
        for mz_noise in rng.uniform(100.0, 1000.0, noise_peaks):
            if all(abs(mz_noise - t) / t * 1e6 > 200.0 for t in targets):
                peaks.append((float(mz_noise), float(rng.uniform(1e3, 2e4))))
        mz, intensity = profile_arrays(peaks) if profile else centroid_arrays(peaks)
        if intensity_jitter:
            intensity = intensity * (1.0 + intensity_jitter * rng.standard_normal(intensity.size))
        scans.append(
            Scan(
                index=index,
                ms_level=1,
                rt_s=rt_s,
                tic=float(intensity.sum()),
                base_peak_mz=float(mz[np.argmax(intensity)]) if mz.size else None,
                base_peak_intensity=float(intensity.max()) if mz.size else None,
                injection_time_ms=20.0,
                is_profile=profile if state_profile else None,
                polarity=polarity,
                mz=mz,
                intensity=intensity,
            )
        )
        index += 1
        for k in range(ms2_per_cycle):
            scans.append(
                Scan(
                    index=index,
                    ms_level=2,
                    rt_s=rt_s + (k + 1) * cycle_s / (ms2_per_cycle + 1),
                    tic=1e4,
                    base_peak_mz=None,
                    base_peak_intensity=None,
                    injection_time_ms=50.0,
                    precursor_mz=500.0,
                    precursor_charge=2 + (k % 2),
                    is_profile=False,
                    polarity=polarity,
                )
            )
            index += 1
    return scans


def header(fmt: str = "mzML", acquired_at_iso: str | None = None) -> RunHeader:
    """A RunHeader for in-memory runs."""
    return RunHeader(format=fmt, acquired_at_iso=acquired_at_iso)


def tic_scans(
    tics: Sequence[float], *, cycle_s: float = 1.0, rt: Sequence[float] | None = None
) -> list[Scan]:
    """MS1 scans carrying only a header TIC (no arrays), one per value, RT every ``cycle_s``."""
    return [
        Scan(
            index=i,
            ms_level=1,
            rt_s=(rt[i] if rt is not None else i * cycle_s),
            tic=float(t),
            base_peak_mz=None,
            base_peak_intensity=float(t) / 10,
        )
        for i, t in enumerate(tics)
    ]
