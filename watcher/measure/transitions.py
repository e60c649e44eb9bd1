"""Targeted runs (SRM/MRM): expected transitions in the chromatograms, their peaks, ion ratios.

A transition is an expected ion with ``product_mz``; its chromatogram is the one whose
precursor and product isolation targets are both within ``tolerance_mz`` of the ion's m/z and
``product_mz`` (the nearest when several are). Within the RT window its apex, height and FWHM
come from the same Gaussian fit as a spectrum XIC's (``xic.elution_peak``); it is found when
its top reaches ``min_intensity`` and 3 x the trace's baseline (a flat trace is no peak); the area
is the trapezoid integral between the points where the trace falls to 1 % of the apex (a Gaussian
keeps 99.7 % of its area there, at +-3.03 sigma), or to the window's or trace's end. The ion
ratio is the area over the area of the ``ratio_to`` transition, as in the ion-ratio criterion
of confirmatory SRM methods (common practice: e.g. SANTE/11312/2021, tolerance +-30 %).

Also the signal of a run without spectra: its TIC chromatogram, or, without one, the sum of its
transition chromatograms per acquisition cycle. Pure: chromatograms in, records out.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from watcher.measure import chromatogram as kinds
from watcher.measure import robust
from watcher.measure.signal import find_dropouts, median_cycle_s, tic_quantile_rts, working_tic
from watcher.measure.xic import elution_peak
from watcher.records import ExpectedIonResult, SignalMetrics

if TYPE_CHECKING:
    from collections.abc import Iterable, Sequence

    from watcher.config import SignalSettings
    from watcher.measure.chromatogram import Chromatogram
    from watcher.measure.scan import FloatArray

AREA_LEVEL = 0.01  # the peak's bounds: where the trace falls to this share of the apex height
# A flat or noisy trace is no peak: its top point must reach PEAK_TO_BASELINE x the trace's
# 10th percentile within the window (the baseline between peaks). 3 follows the usual
# signal-to-noise limit of detection of 3 (common practice); a lab's floor is min_intensity.
BASELINE_QUANTILE = 0.1
PEAK_TO_BASELINE = 3.0


@dataclass(frozen=True, slots=True, kw_only=True)
class Transition:
    """One expected transition, ready to look for (the precursor m/z resolved)."""

    name: str
    precursor_mz: float
    product_mz: float
    tolerance_mz: float
    rt_window_s: tuple[float, float] | None
    min_intensity: float
    ratio_to: str | None = None
    expected_ratio: float | None = None

    def matches(self, chrom: Chromatogram) -> bool:
        """Both isolation targets within tolerance (a TIC or one-target trace never matches)."""
        off = self._offsets(chrom)
        return off is not None and max(off) <= self.tolerance_mz

    def distance(self, chrom: Chromatogram) -> float:
        """How far the chromatogram's targets are from the transition's (m/z, summed)."""
        off = self._offsets(chrom)
        return math.inf if off is None else off[0] + off[1]

    def _offsets(self, chrom: Chromatogram) -> tuple[float, float] | None:
        if chrom.kind == kinds.TIC or chrom.precursor_mz is None or chrom.product_mz is None:
            return None
        return (
            abs(chrom.precursor_mz - self.precursor_mz),
            abs(chrom.product_mz - self.product_mz),
        )


class ChromatogramSet:
    """What a run's chromatograms leave for the metrics, kept as the reader hands them over.

    Kept: the first TIC chromatogram, the nearest match of each transition, and, while no TIC
    has been seen, every transition trace (for the summed signal); so memory is bounded by the
    transitions of a run without a TIC chromatogram.
    """

    def __init__(self, transitions: Sequence[Transition]) -> None:
        self.transitions = tuple(transitions)
        self.count = 0  # chromatograms read
        self.transition_count = 0  # of them with a precursor and a product target
        self.tic: Chromatogram | None = None
        self.matched: dict[str, Chromatogram] = {}
        self._traces: list[Chromatogram] = []

    def add(self, chrom: Chromatogram) -> None:
        """Take one chromatogram from the reader."""
        self.count += 1
        if chrom.kind == kinds.TIC:
            if self.tic is None:
                self.tic = chrom
                self._traces.clear()  # the TIC is the signal: the traces are no longer needed
            return
        if not chrom.is_transition:
            return
        self.transition_count += 1
        for transition in self.transitions:
            # inline pre-test on the product first: most chromatograms match no transition
            if abs(chrom.product_mz - transition.product_mz) > transition.tolerance_mz:  # type: ignore[operator]
                continue
            if not transition.matches(chrom):
                continue
            best = self.matched.get(transition.name)
            if best is None or transition.distance(chrom) < transition.distance(best):
                self.matched[transition.name] = chrom
        if self.tic is None:
            self._traces.append(chrom)

    def signal_trace(self) -> tuple[FloatArray, FloatArray] | None:
        """(time_s, intensity) standing for the run's TIC: the TIC chromatogram, else the sum."""
        if self.tic is not None and self.tic.time_s.size:
            return self.tic.time_s, self.tic.intensity
        return summed_trace(self._traces)


def summed_trace(traces: Iterable[Chromatogram]) -> tuple[FloatArray, FloatArray] | None:
    """The sum of transition traces, one point per acquisition cycle; None without points.

    Transitions are measured one after another within a cycle, so their times differ; the
    points are binned by the median cycle (the median time step within a trace) and summed,
    each bin's time the mean time of its points.
    """
    kept = [t for t in traces if t.time_s.size]
    if not kept:
        return None
    steps = [median_cycle_s(t.time_s) for t in kept]
    known = [s for s in steps if s is not None and s > 0]
    times = np.concatenate([t.time_s for t in kept])
    values = np.nan_to_num(np.concatenate([t.intensity for t in kept]), nan=0.0)
    if not known:
        order = np.argsort(times, kind="stable")
        return times[order], values[order]
    cycle_s = robust.median_of(np.asarray(known, dtype=np.float64))
    bins = np.floor((times - float(times.min())) / cycle_s).astype(np.int64)
    unique, inverse = np.unique(bins, return_inverse=True)
    sums = np.bincount(inverse, weights=values, minlength=unique.size)
    counts = np.bincount(inverse, minlength=unique.size).astype(np.float64)
    mean_times = np.bincount(inverse, weights=times, minlength=unique.size) / counts
    return np.asarray(mean_times, dtype=np.float64), np.asarray(sums, dtype=np.float64)


def chromatogram_signal(
    trace: tuple[FloatArray, FloatArray] | None, settings: SignalSettings
) -> SignalMetrics:
    """Signal metrics of a run without spectra, from its TIC (or summed) chromatogram."""
    empty = SignalMetrics(
        ms1_count=0,
        ms2_count=0,
        rt_start_s=None,
        rt_end_s=None,
        tic_median=None,
        bpi_median=None,
        dropouts=None,
        longest_dropout_s=None,
    )
    if trace is None:
        return empty
    time_s, tic = trace
    keep = np.isfinite(time_s)
    time_s, tic = time_s[keep], tic[keep]
    if not time_s.size:
        return empty
    reference = working_tic(tic, settings.dropout_fraction)
    dropouts: int | None = None
    longest_s: float | None = None
    if reference is not None:
        dropouts, longest_s = find_dropouts(
            tic,
            time_s,
            threshold=settings.dropout_fraction * reference,
            min_scans=settings.dropout_min_scans,
            cycle_s=median_cycle_s(time_s),
        )
    q25, q50, q75 = tic_quantile_rts(time_s, tic, (0.25, 0.5, 0.75))
    return dataclasses.replace(
        empty,
        rt_start_s=float(time_s.min()),
        rt_end_s=float(time_s.max()),
        tic_median=robust.median(tic),
        dropouts=dropouts,
        longest_dropout_s=longest_s,
        tic_rt25_s=q25,
        tic_rt50_s=q50,
        tic_rt75_s=q75,
    )


def transition_results(
    found: ChromatogramSet, *, searchable: bool
) -> tuple[dict[str, ExpectedIonResult], list[str]]:
    """Each transition's result by name, with notes.

    Args:
        found: the run's chromatograms as kept.
        searchable: False when the run has no transition chromatograms at all (a full-scan
            run): every transition is then None (not searched), not missing.
    """
    results: dict[str, ExpectedIonResult] = {}
    notes: list[str] = []
    for transition in found.transitions:
        if not searchable:
            results[transition.name] = absent(transition, searched=False)
            continue
        chrom = found.matched.get(transition.name)
        if chrom is None:
            results[transition.name] = absent(transition)
            notes.append(
                f"expected transition {transition.name} "
                f"({transition.precursor_mz:g} -> {transition.product_mz:g}): "
                "no chromatogram with these targets; reported not found"
            )
            continue
        result, note = measure_transition(transition, chrom)
        results[transition.name] = result
        if note:
            notes.append(note)
    if not searchable and found.transitions:
        notes.append("the run has no transition chromatograms: expected transitions not searched")
    return _with_ratios(found.transitions, results), notes


def measure_transition(
    transition: Transition, chrom: Chromatogram
) -> tuple[ExpectedIonResult, str | None]:
    """The transition's peak in its chromatogram, within its RT window; and a note, if any."""
    time_s, height = chrom.time_s, np.nan_to_num(chrom.intensity, nan=0.0)
    if transition.rt_window_s is not None:
        lo, hi = transition.rt_window_s
        inside = (time_s >= lo) & (time_s <= hi)
        time_s, height = time_s[inside], height[inside]
        if not time_s.size:
            return absent(transition), (
                f"expected transition {transition.name}: no point of its chromatogram in its "
                f"RT window {lo / 60:g}-{hi / 60:g} min; reported not found"
            )
    if not height.size or not float(height.max()) > 0:
        return absent(transition), None
    top = int(np.argmax(height))
    apex_rt_s, apex_intensity, fwhm_s = elution_peak(time_s, height, top)
    baseline = robust.quantile_of(height, BASELINE_QUANTILE)
    return (
        ExpectedIonResult(
            name=transition.name,
            mz=transition.precursor_mz,
            found=apex_intensity >= transition.min_intensity
            and float(height[top]) >= PEAK_TO_BASELINE * baseline,
            apex_rt_s=apex_rt_s,
            apex_intensity=apex_intensity,
            ppm=None,  # unit-resolution isolation: no mass error to speak of
            fwhm_s=fwhm_s,
            m1_ratio=None,
            m1_ratio_expected=None,
            area=peak_area(time_s, height, top),
        ),
        None,
    )


def peak_area(time_s: FloatArray, height: FloatArray, top: int) -> float:
    """Trapezoid area of the peak around ``top``, between its crossings of 1 % of the apex.

    The bounds are interpolated linearly between the points on either side of the crossing;
    where the trace does not fall that far, its first or last point bounds the peak.
    """
    level = AREA_LEVEL * float(height[top])
    left = top
    while left > 0 and height[left - 1] > level:
        left -= 1
    right = top
    last = height.size - 1
    while right < last and height[right + 1] > level:
        right += 1
    x = [float(v) for v in time_s[left : right + 1]]
    y = [float(v) for v in height[left : right + 1]]
    if left > 0:
        x.insert(
            0, _crossing(time_s[left - 1], height[left - 1], time_s[left], height[left], level)
        )
        y.insert(0, level)
    if right < last:
        x.append(
            _crossing(time_s[right], height[right], time_s[right + 1], height[right + 1], level)
        )
        y.append(level)
    xs, ys = np.asarray(x), np.clip(np.asarray(y), 0.0, None)
    return float(np.sum((xs[1:] - xs[:-1]) * (ys[1:] + ys[:-1]) / 2.0))


def _crossing(x0: float, y0: float, x1: float, y1: float, level: float) -> float:
    if y1 == y0:
        return float(x0)
    return float(x0 + (level - y0) * (x1 - x0) / (y1 - y0))


def _with_ratios(
    transitions: Sequence[Transition], results: dict[str, ExpectedIonResult]
) -> dict[str, ExpectedIonResult]:
    """Add the ion ratio where both transitions were found with an area."""
    out = dict(results)
    for transition in transitions:
        if transition.ratio_to is None:
            continue
        this, other = results.get(transition.name), results.get(transition.ratio_to)
        if this is None or other is None or not (this.found and other.found):
            continue
        if this.area is None or other.area is None or not other.area > 0:
            continue
        ratio = this.area / other.area
        deviation = (
            None
            if transition.expected_ratio is None
            else (ratio / transition.expected_ratio - 1.0) * 100.0
        )
        out[transition.name] = dataclasses.replace(
            this,
            ion_ratio=ratio if math.isfinite(ratio) else None,
            ion_ratio_deviation_pct=deviation,
        )
    return out


def absent(transition: Transition, *, searched: bool = True) -> ExpectedIonResult:
    """The result of a transition not seen; ``searched=False``: one the run cannot hold."""
    return ExpectedIonResult(
        name=transition.name,
        mz=transition.precursor_mz,
        found=False if searched else None,
        apex_rt_s=None,
        apex_intensity=None,
        ppm=None,
        fwhm_s=None,
        m1_ratio=None,
        m1_ratio_expected=None,
    )
