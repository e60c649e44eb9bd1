"""Calibrant (lock-mass) drift per MS1 scan and per run, and the suggested linear mass correction.

Knows nothing of rules or alerts: it turns peaks found near a calibrant's m/z into ppm errors
and summarises them as a ``CalibrantDrift`` record.
"""

from __future__ import annotations

import math
from array import array
from typing import TYPE_CHECKING

import numpy as np

from watcher.measure import robust
from watcher.measure.ions import ResolvedIon, ppm_error
from watcher.measure.peaks import find_peak
from watcher.records import CalibrantDrift, MassCorrection

if TYPE_CHECKING:
    from collections.abc import Sequence

    from watcher.measure.scan import FloatArray


def scan_error(
    ion: ResolvedIon, mz: FloatArray, intensity: FloatArray, *, profile: bool
) -> tuple[float, float] | None:
    """(ppm error, intensity) of the calibrant in one MS1 spectrum, None when not found."""
    peak = find_peak(mz, intensity, ion.mz, ion.search_ppm, profile=profile)
    if peak is None:
        return None
    return ppm_error(peak[0], ion.mz), peak[1]


class CalibrantTrace:
    """Per-scan calibrant errors of one run, kept as three compact float arrays."""

    __slots__ = ("intensity", "ion", "ppm", "rt_s", "scans_seen")

    def __init__(self, ion: ResolvedIon) -> None:
        self.ion = ion
        self.scans_seen = 0  # MS1 scans searched (of matching polarity)
        self.ppm = array("d")
        self.intensity = array("d")
        self.rt_s = array("d")  # NaN where the scan has no RT

    def add(
        self,
        rt_s: float | None,
        mz: FloatArray | None,
        intensity: FloatArray | None,
        *,
        profile: bool,
    ) -> None:
        """Search one MS1 scan; a scan without arrays counts as searched and not found."""
        self.scans_seen += 1
        if mz is None or intensity is None or mz.size == 0:
            return
        hit = scan_error(self.ion, mz, intensity, profile=profile)
        if hit is None:
            return
        self.ppm.append(hit[0])
        self.intensity.append(hit[1])
        self.rt_s.append(float("nan") if rt_s is None else rt_s)

    def extend(self, later: CalibrantTrace) -> None:
        """Append the trace of a later block of the same run (see SignalTrace.extend)."""
        self.scans_seen += later.scans_seen
        self.ppm.extend(later.ppm)
        self.intensity.extend(later.intensity)
        self.rt_s.extend(later.rt_s)

    def summary(self) -> CalibrantDrift:
        """The run's drift record for this calibrant."""
        return summarize(
            self.ion,
            ppm=np.frombuffer(self.ppm, dtype=np.float64),
            intensity=np.frombuffer(self.intensity, dtype=np.float64),
            rt_s=np.frombuffer(self.rt_s, dtype=np.float64),
            scans_seen=self.scans_seen,
        )


def summarize(
    ion: ResolvedIon,
    *,
    ppm: Sequence[float] | FloatArray,
    intensity: Sequence[float] | FloatArray,
    rt_s: Sequence[float] | FloatArray,
    scans_seen: int,
) -> CalibrantDrift:
    """Summarise per-scan errors (one entry per scan where the calibrant was found).

    Args:
        ion: the calibrant.
        ppm: mass error per found scan.
        intensity: calibrant peak intensity per found scan.
        rt_s: RT per found scan in seconds (NaN where unknown; left out of the slope only).
        scans_seen: MS1 scans searched, the denominator of ``found_fraction`` (NaN for 0).
    """
    ppm_arr = np.asarray(ppm, dtype=np.float64)
    found = int(ppm_arr.size)
    slope_ppm_per_s = robust.theil_sen_slope(rt_s, ppm_arr) if found >= 2 else None
    return CalibrantDrift(
        name=ion.name,
        mz=ion.mz,
        median_ppm=robust.median(ppm_arr),
        mad_ppm=robust.mad(ppm_arr),
        p05_ppm=robust.percentile(ppm_arr, 5),
        p95_ppm=robust.percentile(ppm_arr, 95),
        # NaN (not measured) when no scan was searched: a run of the other polarity, or MGF.
        found_fraction=found / scans_seen if scans_seen else math.nan,
        median_intensity=robust.median(intensity),
        slope_ppm_per_h=None if slope_ppm_per_s is None else slope_ppm_per_s * 3600.0,
        scans_found=found,
    )


def mass_correction(drifts: Sequence[CalibrantDrift]) -> MassCorrection | None:
    """Least-squares line ppm = a + b x m/z through the calibrants' median errors.

    A suggestion for the operator, never applied to the data. None with fewer than two found
    calibrants at distinct m/z.
    """
    used = [d for d in drifts if d.median_ppm is not None]
    fit = robust.line_fit([d.mz for d in used], [d.median_ppm or 0.0 for d in used])
    if fit is None:
        return None
    return MassCorrection(intercept_ppm=fit[0], slope_ppm_per_mz=fit[1], calibrants_used=len(used))
