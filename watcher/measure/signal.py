"""Signal strength and acquisition shape of a run from spectrum headers: counts, TIC, dropouts.

Keeps a few floats per MS1 scan (RT, TIC, base peak) and a few per MS2 scan, never spectra,
so memory stays flat with run length. Knows nothing of rules or alerts.
"""

from __future__ import annotations

import math
from array import array
from collections import Counter
from typing import TYPE_CHECKING

import numpy as np

from watcher.measure import robust
from watcher.records import SignalMetrics

if TYPE_CHECKING:
    from watcher.config import SignalSettings
    from watcher.measure.scan import FloatArray, Scan

_NAN = float("nan")


class SignalTrace:
    """Accumulates the per-scan header values the signal metrics need."""

    __slots__ = (
        "ms1_bpi",
        "ms1_injection_ms",
        "ms1_rt_s",
        "ms1_tic",
        "ms2_count",
        "ms2_injection_ms",
        "precursor_charges",
        "rt_max_s",
        "rt_min_s",
    )

    def __init__(self) -> None:
        self.ms1_rt_s = array("d")  # NaN where unknown
        self.ms1_tic = array("d")
        self.ms1_bpi = array("d")
        self.ms1_injection_ms = array("d")
        self.ms2_injection_ms = array("d")
        self.ms2_count = 0
        self.precursor_charges: Counter[int] = Counter()
        self.rt_min_s = math.inf
        self.rt_max_s = -math.inf

    def add(self, scan: Scan) -> None:
        """Record one spectrum; MS level None (MGF) counts as MS2."""
        if scan.rt_s is not None and math.isfinite(scan.rt_s):
            self.rt_min_s = min(self.rt_min_s, scan.rt_s)
            self.rt_max_s = max(self.rt_max_s, scan.rt_s)
        if scan.ms_level == 1:
            self.ms1_rt_s.append(_NAN if scan.rt_s is None else scan.rt_s)
            self.ms1_tic.append(_or_nan(_tic(scan)))
            self.ms1_bpi.append(_or_nan(_base_peak(scan)))
            if scan.injection_time_ms is not None:
                self.ms1_injection_ms.append(scan.injection_time_ms)
            return
        self.ms2_count += 1
        if scan.injection_time_ms is not None:
            self.ms2_injection_ms.append(scan.injection_time_ms)
        self.precursor_charges[scan.precursor_charge or 0] += 1

    def extend(self, later: SignalTrace) -> None:
        """Append the trace of the spectra that follow this one's in the file (a later block
        of the same run): the result is the trace one pass over both blocks would give."""
        for name in ("ms1_rt_s", "ms1_tic", "ms1_bpi", "ms1_injection_ms", "ms2_injection_ms"):
            getattr(self, name).extend(getattr(later, name))
        self.ms2_count += later.ms2_count
        self.precursor_charges.update(later.precursor_charges)
        self.rt_min_s = min(self.rt_min_s, later.rt_min_s)
        self.rt_max_s = max(self.rt_max_s, later.rt_max_s)

    def summary(self, settings: SignalSettings) -> SignalMetrics:
        """The run's signal record."""
        rt = np.frombuffer(self.ms1_rt_s, dtype=np.float64)
        tic = np.frombuffer(self.ms1_tic, dtype=np.float64)
        if rt.size and np.isfinite(rt).all():
            # RTs need not increase in file order; dropouts and cycles follow acquisition time.
            order = np.argsort(rt, kind="stable")
            rt, tic = rt[order], tic[order]
        cycle_s = median_cycle_s(rt)
        tic_median = robust.median(tic)
        reference = working_tic(tic, settings.dropout_fraction)
        dropouts: int | None = None
        longest_s: float | None = None
        if tic.size and reference is not None:
            dropouts, longest_s = find_dropouts(
                tic,
                rt,
                threshold=settings.dropout_fraction * reference,
                min_scans=settings.dropout_min_scans,
                cycle_s=cycle_s,
            )
        q25, q50, q75 = tic_quantile_rts(rt, tic, (0.25, 0.5, 0.75))
        has_rt = self.rt_min_s <= self.rt_max_s
        return SignalMetrics(
            ms1_count=int(rt.size),
            ms2_count=self.ms2_count,
            rt_start_s=self.rt_min_s if has_rt else None,
            rt_end_s=self.rt_max_s if has_rt else None,
            tic_median=tic_median,
            bpi_median=robust.median(self.ms1_bpi),
            dropouts=dropouts,
            longest_dropout_s=longest_s,
            ms1_injection_time_ms_median=robust.median(self.ms1_injection_ms),
            ms2_injection_time_ms_median=robust.median(self.ms2_injection_ms),
            cycle_time_s_median=cycle_s,
            tic_rt25_s=q25,
            tic_rt50_s=q50,
            tic_rt75_s=q75,
            precursor_charges=tuple(sorted(self.precursor_charges.items())),
        )


def median_cycle_s(rt_s: FloatArray) -> float | None:
    """Median RT step between consecutive MS1 scans (ascending RT), ignoring unknown RTs."""
    known = rt_s[np.isfinite(rt_s)]
    if known.size < 2:
        return None
    return robust.median_of(np.diff(np.sort(known)))


# The TIC quantile that stands for "the spray works": a failure shorter than 95 % of the run
# cannot pull it down, and it only gates which scans form the reference, so one intense
# elution peak does not raise the dropout threshold.
WORKING_QUANTILE = 0.95


def working_tic(tic: FloatArray, fraction: float) -> float | None:
    """The TIC a dropout is measured against: the median TIC of the scans that worked.

    The run's own median includes the failed scans, so a spray failure of half the run or more
    drags it down until no scan is below ``fraction`` of it. Instead: the scans whose TIC reaches
    ``fraction`` x the run's 95th TIC percentile are the ones where the spray worked, and their
    median is the reference. In a run without a failure that is (nearly) every scan, so the
    reference is the run median as before; in a run that failed for 90 % of its scans it is the
    median of the 10 % that worked. A failure of more than 95 % of the run is not seen as one,
    and when more than 5 % of the scans are over 1 / ``fraction`` times the rest, the rest reads
    as a dropout (by the definition: below ``fraction`` of the working signal).
    """
    known = tic[np.isfinite(tic)]
    if not known.size:
        return None
    top = robust.quantile_of(known, WORKING_QUANTILE)
    working = known[known >= fraction * top]
    return robust.median_of(working) if working.size else None


def find_dropouts(
    tic: FloatArray,
    rt_s: FloatArray,
    *,
    threshold: float,
    min_scans: int,
    cycle_s: float | None,
) -> tuple[int, float | None]:
    """Count runs of consecutive MS1 scans with TIC below ``threshold``.

    Args:
        tic: MS1 TIC in acquisition order (NaN = unknown, never low).
        rt_s: MS1 RT in seconds, same order (NaN = unknown).
        threshold: TIC below this is a dropout scan (e.g. 0.1 x run median).
        min_scans: a run of low scans counts only when at least this long.
        cycle_s: median MS1 cycle of the run, for a dropout whose own scans give no step.

    Returns:
        (count, longest duration in seconds). A dropout lasts from its first low scan to its
        last low scan plus one step of its own cadence (the median RT step between its low
        scans), wherever it sits in the run. In DDA the MS1 scans come faster while the spray is
        out (no precursors, no MS2), so the run's median cycle would oversize a dropout at the
        end of the run several times. A single low scan takes the step to the next scan, else
        the run's median cycle. Without RTs it is scans x median cycle; None when neither is
        known; 0.0 when there is no dropout.
    """
    low = tic < threshold  # NaN compares False: unknown TIC is not a dropout
    count = 0
    longest: float | None = 0.0
    i = 0
    n = int(low.size)
    while i < n:
        if not low[i]:
            i += 1
            continue
        start = i
        while i < n and low[i]:
            i += 1
        length = i - start
        if length < max(min_scans, 1):
            continue
        count += 1
        duration = _dropout_s(rt_s, start, i, cycle_s)
        if duration is None:
            longest = None
        elif longest is not None:
            longest = max(longest, duration)
    return count, longest


def _dropout_s(rt_s: FloatArray, start: int, end: int, cycle_s: float | None) -> float | None:
    """Duration of the low scans ``rt_s[start:end]``: their span plus one step of their own."""
    segment = rt_s[start:end]
    if np.isfinite(segment).all():
        if segment.size >= 2:
            step = robust.median_of(np.diff(segment))
        elif end < rt_s.size and math.isfinite(rt_s[end]):
            step = float(rt_s[end] - segment[0])
        elif cycle_s is not None:
            step = cycle_s
        else:
            return None
        return float(segment[-1] - segment[0]) + step
    return segment.size * cycle_s if cycle_s is not None else None


def tic_quantile_rts(
    rt_s: FloatArray, tic: FloatArray, fractions: tuple[float, ...]
) -> tuple[float | None, ...]:
    """RT by which each fraction of the summed MS1 TIC has eluted (linear within a scan step)."""
    keep = np.isfinite(rt_s) & np.isfinite(tic)
    rt, values = rt_s[keep], tic[keep]
    if not rt.size or not values.sum() > 0:
        return tuple(None for _ in fractions)
    order = np.argsort(rt, kind="stable")
    rt, cum = rt[order], np.cumsum(values[order])
    total = float(cum[-1])
    out: list[float | None] = []
    for fraction in fractions:
        target = fraction * total
        k = int(np.searchsorted(cum, target, side="left"))
        if k == 0:
            out.append(float(rt[0]))
            continue
        step = float(cum[k] - cum[k - 1])
        share = (target - float(cum[k - 1])) / step if step > 0 else 1.0
        out.append(float(rt[k - 1] + share * (rt[k] - rt[k - 1])))
    return tuple(out)


def _tic(scan: Scan) -> float | None:
    """Header TIC, else the sum of the decoded intensities (finite, negatives as zero).

    A header value that is NaN, infinite or negative is not a TIC (a broken export); the arrays
    are used instead when they were decoded. Negative points (baseline-subtraction artefacts)
    count as zero, so a few of them cannot pull the TIC below what the ions gave.
    """
    if _usable(scan.tic):
        return scan.tic
    counts = _counts(scan.intensity)
    if counts is not None:
        return float(counts.sum())
    return None


def _base_peak(scan: Scan) -> float | None:
    """Header base-peak intensity, else the largest decoded intensity (same rules as ``_tic``)."""
    if _usable(scan.base_peak_intensity):
        return scan.base_peak_intensity
    counts = _counts(scan.intensity)
    if counts is not None and counts.size:
        return float(counts.max())
    return None


def _usable(value: float | None) -> bool:
    return value is not None and math.isfinite(value) and value >= 0.0


def _counts(intensity: FloatArray | None) -> FloatArray | None:
    """The intensities with NaN/inf dropped and negative values as zero (None: not decoded)."""
    if intensity is None:
        return None
    if intensity.size and not (np.isfinite(intensity).all() and intensity.min() >= 0.0):
        intensity = np.clip(intensity[np.isfinite(intensity)], 0.0, None)
    return intensity


def _or_nan(value: float | None) -> float:
    return _NAN if value is None else float(value)
