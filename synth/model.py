"""Synthetic LC-MS run model: the run spec, the scan stream it generates and its exact ground truth.

Everything is drawn from one seeded numpy generator, so a spec always yields the same scans,
whatever file format they are written to. The writers (``synth.mzml``, ``synth.mzxml``,
``synth.mgf``) only serialise ``iter_scans`` output; the truth is collected while scans are made.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import TYPE_CHECKING

import numpy as np
import numpy.typing as npt

if TYPE_CHECKING:
    from collections.abc import Iterator

FloatArray = npt.NDArray[np.float64]

NEUTRON_SPACING_MZ = 1.003355  # 13C - 12C mass difference, the isotope spacing at charge 1
FWHM_PER_SIGMA = 2.3548  # 2 * sqrt(2 ln 2)
PROFILE_POINTS_PER_FWHM = 5.0  # sampling density of profile peaks, typical of TOF exports
PROFILE_HALF_WIDTH_POINTS = 9  # points each side of a profile apex (about +-4 sigma)
_CLEAR_PPM = 150.0  # background peaks keep this far from every calibrant and target isotope


@dataclass(kw_only=True)
class CalibrantTruth:
    """A calibrant (lock mass) ion present in every MS1 scan, with a known mass error over time.

    The true error at RT t (s) is ``offset_ppm + slope_ppm_per_h * t / 3600 + jitter`` (Gaussian,
    SD ``jitter_ppm``), plus ``jump_ppm`` from ``jump_at_s`` on.
    """

    name: str
    mz: float
    offset_ppm: float = 0.0
    slope_ppm_per_h: float = 0.0
    jitter_ppm: float = 0.0
    intensity: float = 2e5
    jump_at_s: float | None = None
    jump_ppm: float = 0.0


@dataclass(kw_only=True)
class TargetTruth:
    """An expected ion that elutes as a Gaussian in RT, with M+1 and M+2 isotope peaks."""

    name: str
    mz: float
    charge: int = 1
    m1_ratio: float = 0.1
    m2_ratio: float = 0.01
    apex_rt_s: float
    sigma_s: float = 6.0
    height: float = 1e6
    offset_ppm: float = 0.0


def _default_start() -> datetime:
    return datetime(2026, 3, 2, 8, 0, 0, tzinfo=UTC)


@dataclass(kw_only=True)
class RunSpec:
    """Shape of one synthetic run: timing, data mode, ions, dropouts and the RNG seed."""

    duration_s: float = 900.0
    ms1_interval_s: float = 2.0
    ms2_per_cycle: int = 3
    ms2_peaks: int = 150
    profile: bool = False
    mz_range: tuple[float, float] = (100.0, 1200.0)
    background_peaks: int = 300
    calibrants: list[CalibrantTruth] = field(default_factory=list)
    targets: list[TargetTruth] = field(default_factory=list)
    # (start_s, end_s, factor applied to all MS1 intensities)
    dropouts: list[tuple[float, float, float]] = field(default_factory=list)
    tic_scale: float = 1.0
    seed: int = 0
    polarity: int = 1
    start_time: datetime = field(default_factory=_default_start)
    injection_time_ms: float = 20.0
    profile_resolution: float = 20000.0

    def __post_init__(self) -> None:
        if self.start_time.tzinfo is None:
            raise ValueError("RunSpec.start_time must be timezone-aware (UTC)")
        if self.polarity not in (1, -1):
            raise ValueError(f"RunSpec.polarity must be 1 or -1, got {self.polarity}")
        if self.ms1_interval_s <= 0 or self.duration_s <= 0:
            raise ValueError("RunSpec.duration_s and ms1_interval_s must be positive")

    @property
    def n_cycles(self) -> int:
        """Number of MS1 scans (one per cycle)."""
        return max(1, math.floor(self.duration_s / self.ms1_interval_s))

    @property
    def n_spectra(self) -> int:
        return self.n_cycles * (1 + self.ms2_per_cycle)


@dataclass(slots=True)
class SynthScan:
    """One generated spectrum, ready to serialise (arrays sorted by m/z)."""

    index: int
    scan_number: int  # 1-based, used in native ids ``scan=N``
    ms_level: int
    rt_s: float
    mz: FloatArray
    intensity: FloatArray
    is_profile: bool
    injection_time_ms: float
    precursor_mz: float | None = None
    precursor_charge: int | None = None
    precursor_intensity: float | None = None
    precursor_scan_number: int | None = None

    @property
    def tic(self) -> float:
        return float(self.intensity.sum())

    @property
    def base_peak(self) -> tuple[float, float]:
        if self.intensity.size == 0:
            return (0.0, 0.0)
        i = int(np.argmax(self.intensity))
        return (float(self.mz[i]), float(self.intensity[i]))


@dataclass(kw_only=True)
class CalibrantResultTruth:
    """Per-scan and per-run truth of one calibrant."""

    name: str
    mz: float
    ppm_per_scan: list[float]  # true error in each MS1 scan where present
    rt_s_per_scan: list[float]
    median_ppm: float
    slope_ppm_per_h: float
    found_fraction: float
    median_intensity: float


@dataclass(kw_only=True)
class TargetResultTruth:
    """Truth of one expected ion's elution peak."""

    name: str
    mz: float  # theoretical monoisotopic m/z
    mz_observed: float  # with the target's offset_ppm applied
    ppm: float
    apex_rt_s: float  # true (continuous) apex
    apex_height: float  # true height at the apex, scaled by tic_scale and any dropout there
    sampled_apex_rt_s: float  # the MS1 scan closest to the apex
    sampled_apex_height: float
    fwhm_s: float
    m1_ratio: float
    m2_ratio: float


@dataclass(kw_only=True)
class RunTruth:
    """Exact ground truth of a generated run, filled while its scans are generated."""

    ms1_count: int = 0
    ms2_count: int = 0
    rt_start_s: float | None = None
    rt_end_s: float | None = None
    ms1_rt_s: list[float] = field(default_factory=list)
    ms1_tic: list[float] = field(default_factory=list)
    ms1_bpi: list[float] = field(default_factory=list)
    ms1_injection_time_ms: list[float] = field(default_factory=list)
    ms2_injection_time_ms: list[float] = field(default_factory=list)
    precursor_charges: dict[int, int] = field(default_factory=dict)
    calibrants: dict[str, CalibrantResultTruth] = field(default_factory=dict)
    targets: dict[str, TargetResultTruth] = field(default_factory=dict)
    start_time: datetime | None = None
    profile: bool = False

    @property
    def tic_median(self) -> float:
        return float(np.median(self.ms1_tic)) if self.ms1_tic else math.nan

    @property
    def bpi_median(self) -> float:
        return float(np.median(self.ms1_bpi)) if self.ms1_bpi else math.nan

    @property
    def cycle_time_s_median(self) -> float:
        return float(np.median(np.diff(self.ms1_rt_s))) if len(self.ms1_rt_s) > 1 else math.nan

    @property
    def ms1_injection_time_ms_median(self) -> float:
        return float(np.median(self.ms1_injection_time_ms))

    @property
    def ms2_injection_time_ms_median(self) -> float:
        if not self.ms2_injection_time_ms:
            return math.nan
        return float(np.median(self.ms2_injection_time_ms))


def ppm_at(cal: CalibrantTruth, rt_s: float, jitter: float) -> float:
    """True mass error (ppm) of a calibrant at ``rt_s`` given a drawn jitter value (ppm)."""
    ppm = cal.offset_ppm + cal.slope_ppm_per_h * rt_s / 3600.0 + jitter
    if cal.jump_at_s is not None and rt_s >= cal.jump_at_s:
        ppm += cal.jump_ppm
    return ppm


def dropout_factor(spec: RunSpec, rt_s: float) -> float:
    """Product of the factors of every dropout window holding ``rt_s``."""
    factor = 1.0
    for start_s, end_s, f in spec.dropouts:
        if start_s <= rt_s < end_s:
            factor *= f
    return factor


def _clear_of(mz: FloatArray, reserved_mz: list[float]) -> npt.NDArray[np.bool_]:
    keep = np.ones(mz.shape, dtype=bool)
    for r in reserved_mz:
        keep &= np.abs(mz - r) / r * 1e6 > _CLEAR_PPM
    return keep


def _reserved_mz(spec: RunSpec) -> list[float]:
    out = [c.mz for c in spec.calibrants]
    for t in spec.targets:
        out += [t.mz + k * NEUTRON_SPACING_MZ / abs(t.charge) for k in range(3)]
    return out


def _profile_sample(
    peak_mz: FloatArray, peak_int: FloatArray, resolution: float, mz_lo: float
) -> tuple[FloatArray, FloatArray]:
    """Sample Gaussian peaks (FWHM = mz / resolution) on one log-uniform m/z grid.

    A grid of constant relative spacing has the same number of points per FWHM everywhere; the
    apexes fall wherever they fall on it, so in general between two samples.
    """
    if peak_mz.size == 0:
        return np.empty(0), np.empty(0)
    step = 1.0 / (resolution * PROFILE_POINTS_PER_FWHM)
    log_step = math.log1p(step)
    centre = np.log(peak_mz / mz_lo) / log_step
    offsets = np.arange(-PROFILE_HALF_WIDTH_POINTS, PROFILE_HALF_WIDTH_POINTS + 2)
    idx = np.floor(centre).astype(np.int64)[:, None] + offsets[None, :]
    grid_mz = mz_lo * np.exp(idx * log_step)
    sigma = (peak_mz / resolution / FWHM_PER_SIGMA)[:, None]
    values = peak_int[:, None] * np.exp(-0.5 * ((grid_mz - peak_mz[:, None]) / sigma) ** 2)
    flat_idx = idx.ravel()
    uniq, inverse = np.unique(flat_idx, return_inverse=True)
    summed = np.bincount(inverse, weights=values.ravel()).astype(np.float64)
    return mz_lo * np.exp(uniq * log_step), summed


def iter_scans(spec: RunSpec, truth: RunTruth) -> Iterator[SynthScan]:
    """Generate the run's spectra in acquisition order, filling ``truth`` as they are made.

    Per cycle: one MS1 scan at ``k * ms1_interval_s``, then ``ms2_per_cycle`` MS2 scans evenly
    spaced before the next MS1. ``truth`` is complete once the iterator is exhausted.
    """
    rng = np.random.default_rng(spec.seed)
    mz_lo, mz_hi = spec.mz_range
    reserved = _reserved_mz(spec)
    bg_mz = rng.uniform(mz_lo, mz_hi, size=spec.background_peaks * 2)
    bg_mz = np.sort(bg_mz[_clear_of(bg_mz, reserved)][: spec.background_peaks])
    bg_int = rng.lognormal(mean=math.log(2e4), sigma=1.0, size=bg_mz.size)
    n_cycles = spec.n_cycles
    ms2_step_s = spec.ms1_interval_s / (spec.ms2_per_cycle + 1)
    truth.start_time = spec.start_time
    truth.profile = spec.profile
    cal_ppm: dict[str, list[float]] = {c.name: [] for c in spec.calibrants}
    cal_rt: dict[str, list[float]] = {c.name: [] for c in spec.calibrants}
    cal_int: dict[str, list[float]] = {c.name: [] for c in spec.calibrants}
    index = 0
    for k in range(n_cycles):
        rt_s = k * spec.ms1_interval_s
        factor = dropout_factor(spec, rt_s) * spec.tic_scale
        noise = rng.lognormal(mean=0.0, sigma=0.15, size=bg_mz.size)
        peaks_mz = [bg_mz]
        peaks_int = [bg_int * noise * factor]
        for cal in spec.calibrants:
            jitter = float(rng.normal(0.0, cal.jitter_ppm)) if cal.jitter_ppm > 0 else 0.0
            ppm = ppm_at(cal, rt_s, jitter)
            height = cal.intensity * factor
            if height > 0:
                peaks_mz.append(np.array([cal.mz * (1 + ppm * 1e-6)]))
                peaks_int.append(np.array([height]))
                cal_ppm[cal.name].append(ppm)
                cal_rt[cal.name].append(rt_s)
                cal_int[cal.name].append(height)
        for tgt in spec.targets:
            elution = math.exp(-0.5 * ((rt_s - tgt.apex_rt_s) / tgt.sigma_s) ** 2)
            height = tgt.height * elution * factor
            if height < 1.0:  # below one count: the ion is not in this scan
                continue
            z = abs(tgt.charge)
            for iso, ratio in enumerate((1.0, tgt.m1_ratio, tgt.m2_ratio)):
                if ratio <= 0:
                    continue
                iso_mz = (tgt.mz + iso * NEUTRON_SPACING_MZ / z) * (1 + tgt.offset_ppm * 1e-6)
                peaks_mz.append(np.array([iso_mz]))
                peaks_int.append(np.array([height * ratio]))
        all_mz = np.concatenate(peaks_mz)
        all_int = np.concatenate(peaks_int)
        order = np.argsort(all_mz, kind="stable")
        all_mz, all_int = all_mz[order], all_int[order]
        positive = all_int > 0
        all_mz, all_int = all_mz[positive], all_int[positive]
        if spec.profile:
            all_mz, all_int = _profile_sample(all_mz, all_int, spec.profile_resolution, mz_lo)
        it_ms = spec.injection_time_ms * float(rng.uniform(0.9, 1.1))
        ms1 = SynthScan(
            index=index,
            scan_number=index + 1,
            ms_level=1,
            rt_s=rt_s,
            mz=all_mz,
            intensity=all_int,
            is_profile=spec.profile,
            injection_time_ms=it_ms,
        )
        truth.ms1_count += 1
        truth.ms1_rt_s.append(rt_s)
        truth.ms1_tic.append(ms1.tic)
        truth.ms1_bpi.append(ms1.base_peak[1])
        truth.ms1_injection_time_ms.append(it_ms)
        _extend_rt(truth, rt_s)
        yield ms1
        ms1_number = index + 1
        index += 1
        for j in range(spec.ms2_per_cycle):
            ms2 = _ms2_scan(spec, rng, index, rt_s + (j + 1) * ms2_step_s, ms1_number, bg_mz)
            truth.ms2_count += 1
            truth.ms2_injection_time_ms.append(ms2.injection_time_ms)
            charge = ms2.precursor_charge or 0
            truth.precursor_charges[charge] = truth.precursor_charges.get(charge, 0) + 1
            _extend_rt(truth, ms2.rt_s)
            yield ms2
            index += 1
    _finish_truth(spec, truth, cal_ppm, cal_rt, cal_int)


def _extend_rt(truth: RunTruth, rt_s: float) -> None:
    truth.rt_start_s = rt_s if truth.rt_start_s is None else min(truth.rt_start_s, rt_s)
    truth.rt_end_s = rt_s if truth.rt_end_s is None else max(truth.rt_end_s, rt_s)


def _ms2_scan(
    spec: RunSpec,
    rng: np.random.Generator,
    index: int,
    rt_s: float,
    ms1_number: int,
    bg_mz: FloatArray,
) -> SynthScan:
    n_peaks = max(1, int(spec.ms2_peaks * rng.uniform(0.7, 1.3)))
    precursor_mz = float(bg_mz[rng.integers(bg_mz.size)]) if bg_mz.size else 500.0
    charge = int(rng.choice((1, 2, 2, 3)))
    frag_mz = np.sort(rng.uniform(spec.mz_range[0], precursor_mz * charge, size=n_peaks))
    frag_int = rng.lognormal(mean=math.log(5e3), sigma=1.0, size=n_peaks)
    return SynthScan(
        index=index,
        scan_number=index + 1,
        ms_level=2,
        rt_s=rt_s,
        mz=frag_mz,
        intensity=frag_int,
        is_profile=False,
        injection_time_ms=spec.injection_time_ms * 2.5 * float(rng.uniform(0.9, 1.1)),
        precursor_mz=precursor_mz,
        precursor_charge=charge,
        precursor_intensity=float(rng.lognormal(math.log(1e5), 0.5)),
        precursor_scan_number=ms1_number,
    )


def _finish_truth(
    spec: RunSpec,
    truth: RunTruth,
    cal_ppm: dict[str, list[float]],
    cal_rt: dict[str, list[float]],
    cal_int: dict[str, list[float]],
) -> None:
    n_ms1 = max(truth.ms1_count, 1)
    for cal in spec.calibrants:
        ppms = cal_ppm[cal.name]
        truth.calibrants[cal.name] = CalibrantResultTruth(
            name=cal.name,
            mz=cal.mz,
            ppm_per_scan=ppms,
            rt_s_per_scan=cal_rt[cal.name],
            median_ppm=float(np.median(ppms)) if ppms else math.nan,
            slope_ppm_per_h=cal.slope_ppm_per_h,
            found_fraction=len(ppms) / n_ms1,
            median_intensity=float(np.median(cal_int[cal.name])) if ppms else math.nan,
        )
    rts = np.asarray(truth.ms1_rt_s)
    for tgt in spec.targets:
        scale = spec.tic_scale * dropout_factor(spec, tgt.apex_rt_s)
        nearest = int(np.argmin(np.abs(rts - tgt.apex_rt_s)))
        sampled_rt = float(rts[nearest])
        sampled_elution = math.exp(-0.5 * ((sampled_rt - tgt.apex_rt_s) / tgt.sigma_s) ** 2)
        truth.targets[tgt.name] = TargetResultTruth(
            name=tgt.name,
            mz=tgt.mz,
            mz_observed=tgt.mz * (1 + tgt.offset_ppm * 1e-6),
            ppm=tgt.offset_ppm,
            apex_rt_s=tgt.apex_rt_s,
            apex_height=tgt.height * scale,
            sampled_apex_rt_s=sampled_rt,
            sampled_apex_height=tgt.height
            * sampled_elution
            * spec.tic_scale
            * dropout_factor(spec, sampled_rt),
            fwhm_s=FWHM_PER_SIGMA * tgt.sigma_s,
            m1_ratio=tgt.m1_ratio,
            m2_ratio=tgt.m2_ratio,
        )


def simulate(spec: RunSpec) -> RunTruth:
    """The truth of ``spec`` without writing a file (runs the whole generator)."""
    truth = RunTruth()
    for _ in iter_scans(spec, truth):
        pass
    return truth
