"""Measure one run: stream its scans once through the signal, calibrant and expected-ion traces.

``measure_scans`` is pure over in-memory scans (and the chromatograms kept of the run, for
expected transitions and the signal of a targeted run without spectra); ``measure_file`` adds
the file edge (completeness check, reader) and turns a file without spectra or chromatograms
into a ReadError.
"""

from __future__ import annotations

import os
from collections import Counter
from datetime import UTC, datetime
from typing import TYPE_CHECKING

from watcher.errors import ConfigError, ConfigProblem, ReadError
from watcher.measure.calibrant import CalibrantTrace, mass_correction
from watcher.measure.ions import ResolvedIon, resolve
from watcher.measure.peaks import looks_profile
from watcher.measure.signal import SignalTrace
from watcher.measure.transitions import (
    ChromatogramSet,
    Transition,
    chromatogram_signal,
    transition_results,
)
from watcher.measure.xic import XicTrace, absent
from watcher.records import (
    CalibrantDrift,
    ExpectedIonResult,
    FileChecks,
    ReadFailure,
    RunMetrics,
    SignalMetrics,
)

if TYPE_CHECKING:
    from collections.abc import Callable, Iterable, Iterator
    from pathlib import Path

    from watcher.config import Config, ExpectedIon, IonSpec
    from watcher.measure.scan import RunHeader, Scan

NO_MS1_NOTE = "no MS1 spectra: calibrant and expected-ion metrics not available"
NO_ARRAYS_NOTE = (
    "MS1 spectra carry no peak arrays: calibrant and expected-ion metrics not available"
)
TARGETED_NOTE = (
    "targeted run (chromatograms, no spectra): calibrant ppm not measured (unit-resolution "
    "instruments are not checked in ppm); expected ions without product_mz not searched"
)


def measure_scans(
    header: RunHeader,
    scans: Iterable[Scan],
    config: Config,
    *,
    file_name: str,
    chromatograms: ChromatogramSet | None = None,
) -> RunMetrics:
    """Compute every metric of one run in a single pass over its scans.

    Args:
        header: what the reader knows of the whole run (format, start time stamp).
        scans: the run's spectra in file order; only MS1 scans need arrays.
        config: calibrants, expected ions and signal settings.
        file_name: the name reported in the metrics.
        chromatograms: what was kept of the run's chromatograms (``transition_set``), filled
            by the time ``scans`` ends; None: the run has none (or they were not read).

    Raises:
        ConfigError: an ion in the config cannot be resolved to an m/z.
    """
    traces = RunTraces(config)
    for scan in scans:
        traces.add(scan)
    return traces.metrics(header, config, file_name=file_name, chromatograms=chromatograms)


class RunTraces:
    """What one pass over a run's spectra accumulates: the signal, calibrant and expected-ion
    traces and the MS1 counts. Every trace only appends per scan, so the traces of contiguous
    blocks of one run, ``extend``ed in file order, are exactly the traces of one pass (the
    parallel reader of indexed mzML, watcher/measure/parallel.py, relies on it)."""

    __slots__ = ("calibrants", "damaged", "expected", "ms1_with_arrays", "polarities", "signal")

    def __init__(self, config: Config) -> None:
        self.calibrants = [CalibrantTrace(ion) for ion in _resolve_all(config, "calibrants")]
        expected_specs = [spec for spec in config.expected_ions if not spec.is_transition]
        self.expected = [
            XicTrace(
                ion,
                rt_window_s=None
                if spec.rt_window_min is None
                else (spec.rt_window_min[0] * 60.0, spec.rt_window_min[1] * 60.0),
                min_intensity=spec.min_intensity,
            )
            for ion, spec in zip(_resolve_all(config, "expected_ions"), expected_specs, strict=True)
        ]
        self.signal = SignalTrace()
        self.ms1_with_arrays = 0
        self.damaged = 0  # spectra read as empty: their peak arrays were missing or short
        self.polarities: Counter[int | None] = Counter()  # MS1 scans by polarity (None: unsaid)

    def add(self, scan: Scan) -> None:
        """Take one spectrum (in file order)."""
        self.signal.add(scan)
        self.damaged += scan.arrays_damaged
        calibrants, expected = self.calibrants, self.expected
        if scan.ms_level != 1 or not (calibrants or expected):
            return
        mz, intensity = scan.mz, scan.intensity
        has_arrays = mz is not None and intensity is not None and mz.size > 0
        self.ms1_with_arrays += has_arrays
        self.polarities[scan.polarity] += 1
        profile = bool(scan.is_profile)
        if scan.is_profile is None and mz is not None and has_arrays:
            profile = looks_profile(mz)
        for cal in calibrants:
            if _polarity_matches(cal.ion, scan):
                cal.add(scan.rt_s, mz, intensity, profile=profile)
        for xic in expected:
            rt_s = scan.rt_s
            if rt_s is not None and _polarity_matches(xic.ion, scan) and xic.wants(rt_s):
                xic.add(rt_s, mz, intensity, profile=profile)

    def extend(self, later: RunTraces) -> None:
        """Append the traces of the block of spectra that follows this one's in the file."""
        self.signal.extend(later.signal)
        for mine, theirs in zip(self.calibrants, later.calibrants, strict=True):
            mine.extend(theirs)
        for xic, other in zip(self.expected, later.expected, strict=True):
            xic.extend(other)
        self.ms1_with_arrays += later.ms1_with_arrays
        self.damaged += later.damaged
        self.polarities.update(later.polarities)

    def metrics(
        self,
        header: RunHeader,
        config: Config,
        *,
        file_name: str,
        chromatograms: ChromatogramSet | None = None,
    ) -> RunMetrics:
        """The run's metrics from everything taken so far (and the chromatograms kept)."""
        calibrants, expected = self.calibrants, self.expected
        signal_metrics = self.signal.summary(config.signal)
        notes: list[str] = list(header.notes)
        if self.damaged:
            notes.append(damaged_note(self.damaged))
        drifts: tuple[CalibrantDrift, ...] = tuple(cal.summary() for cal in calibrants)
        if (
            chromatograms is not None
            and chromatograms.count > 0
            and signal_metrics.ms1_count + signal_metrics.ms2_count == 0
        ):
            signal_metrics = chromatogram_signal(chromatograms.signal_trace(), config.signal)
            notes.append(TARGETED_NOTE)
            ions = tuple(absent(xic.ion, searched=False) for xic in expected)
        elif signal_metrics.ms1_count == 0:
            if calibrants or expected:
                notes.append(NO_MS1_NOTE)
            ions = tuple(absent(xic.ion, searched=False) for xic in expected)
        elif self.ms1_with_arrays == 0:
            if calibrants or expected:
                notes.append(NO_ARRAYS_NOTE)
            ions = tuple(absent(xic.ion, searched=False) for xic in expected)
        else:
            ions, ion_notes = _searched_ions(expected, self.polarities, signal_metrics)
            notes.extend(ion_notes)
        ions, transition_notes = _with_transitions(config, ions, chromatograms)
        notes.extend(transition_notes)
        acquired_at = _parse_acquired_at(header.acquired_at_iso)
        if header.acquired_at_iso and acquired_at is None:
            notes.append(f"run start time {header.acquired_at_iso!r} is not ISO-8601; ignored")
        return RunMetrics(
            file=file_name,
            format=header.format,
            acquired_at=acquired_at,
            signal=signal_metrics,
            calibrants=drifts,
            mass_correction=mass_correction(drifts) if len(drifts) >= 2 else None,
            expected_ions=ions,
            notes=tuple(notes),
            file_checks=FileChecks(checksum_ok=header.checksum_ok),
        )


MAX_REASON_CHARS = 240


def measure_or_failure(
    path: Path,
    config: Config,
    *,
    progress: Callable[[int, int], None] | None = None,
    memory_limit_mb: int | None = None,
) -> RunMetrics | ReadFailure:
    """``measure_file`` for callers that must go on with the next file: the one mapping of every
    way a file can fail into a ReadFailure (the daemon's measuring child and ``check`` share it).

    A reader bug (any other exception) is the file's failure too, kind ``corrupt``: one odd
    file must not stop a night's queue. Out of memory is kind ``memory``; ``memory_limit_mb``
    names the limit the measuring process ran under, if any.

    Raises:
        ConfigError: an ion in the config cannot be resolved (the config is wrong, not the file).
    """
    try:
        return measure_file(path, config, progress=progress)
    except ReadError as exc:
        return ReadFailure(kind=exc.kind, reason=one_line(exc.reason, path))
    except ConfigError:
        raise
    except MemoryError:
        limit = (
            f" (limit {memory_limit_mb} MB)" if memory_limit_mb is not None else " while reading"
        )
        return ReadFailure(kind="memory", reason=f"out of memory{limit}")
    except Exception as exc:
        return ReadFailure(kind="corrupt", reason=one_line(f"{type(exc).__name__}: {exc}", path))


def one_line(text: str, path: Path) -> str:
    """One line, no directory names (they may be private), at most ``MAX_REASON_CHARS``."""
    for folder in {str(path.parent.resolve()), str(path.parent)}:
        if folder not in ("", "."):
            text = text.replace(folder + os.sep, "")
    line = " ".join(text.split())
    return line if len(line) <= MAX_REASON_CHARS else line[: MAX_REASON_CHARS - 3] + "..."


def measure_file(
    path: Path, config: Config, *, progress: Callable[[int, int], None] | None = None
) -> RunMetrics:
    """Measure a run file: check it is whole, stream it through the reader, compute the metrics.

    Args:
        path: the run file (mzML, mzML.gz, mzXML or MGF; the format comes from its content).
        config: the lab's config.
        progress: called as ``progress(done, total)`` while the reader works (units its own).

    Raises:
        ReadError: the file is truncated, corrupt, of no known format, or holds neither spectra
            nor chromatograms.
        ConfigError: an ion in the config cannot be resolved.
    """
    from watcher.intake import formats
    from watcher.measure.readers import read

    # A .gz stream is proven whole in the reading pass itself (one gunzip, not two); no metrics
    # leave here before that proof is in.
    formats.check_complete(path, whole_gzip=False)
    spectrum_ions = [spec for spec in config.expected_ions if not spec.is_transition]
    needs_arrays = bool(config.calibrants or spectrum_ions)
    # Chromatograms are read when the config has transitions, or when the run has no spectra
    # (its signal then comes from them); a spectrum run's pass costs what it did otherwise.
    kept = transition_set(config)
    workers = parallel_workers(config)
    if workers > 1 and not kept.transitions:
        # A large indexed mzML is read in blocks on several cores (spectra only: a run whose
        # signal must come from its chromatograms gives no spectra and is read below).
        from watcher.measure import parallel

        metrics = parallel.measure_in_blocks(path, config, workers=workers, progress=progress)
        if metrics is not None and metrics.signal.ms1_count + metrics.signal.ms2_count > 0:
            return metrics
    wish = read.ChromatogramWish(kept.add, with_spectra=bool(kept.transitions))
    # A cut, damaged or too large .gz can fail anywhere in that pass: open_run then names the
    # stream's problem (kind "truncated" or "too-large") from the same pass.
    with read.open_run(
        path,
        ms1_arrays=needs_arrays,
        progress=progress,
        check_gzip=True,
        max_inflated_bytes=config.limits.max_inflated_mb * 1024 * 1024,
        chromatograms=wish,
    ) as (header, scans):
        tally = _Tally(scans)
        metrics = measure_scans(header, tally, config, file_name=path.name, chromatograms=kept)
    if metrics.signal.ms1_count + metrics.signal.ms2_count == 0 and kept.count == 0:
        raise ReadError(path, "no spectra or chromatograms in file", kind="empty")
    if tally.count and tally.damaged == tally.count:
        # Every spectrum empty for want of its arrays: nothing of the run could be read.
        raise ReadError(
            path, f"no spectrum can be read: {damaged_note(tally.damaged)}", kind="corrupt"
        )
    return metrics


def parallel_workers(config: Config) -> int:
    """How many processes may read one run (``limits.workers``; 0: the cores, at most 4)."""
    if config.limits.workers == 1:
        return 1
    from watcher.measure import parallel

    return parallel.worker_count(config.limits.workers)


def transition_set(config: Config) -> ChromatogramSet:
    """An empty ChromatogramSet for the config's expected transitions (precursors resolved).

    Raises:
        ConfigError: a transition's precursor cannot be resolved to an m/z.
    """
    specs = [spec for spec in config.expected_ions if spec.is_transition]
    transitions = [
        _transition(ion, spec)
        for ion, spec in zip(_resolve_all(config, "expected_ions", specs), specs, strict=True)
    ]
    return ChromatogramSet(transitions)


def _transition(ion: ResolvedIon, spec: ExpectedIon) -> Transition:
    window = spec.rt_window_min
    return Transition(
        name=ion.name,
        precursor_mz=ion.mz,
        product_mz=spec.product_mz or 0.0,  # only transitions come here: product_mz is set
        tolerance_mz=spec.tolerance_mz,
        rt_window_s=None if window is None else (window[0] * 60.0, window[1] * 60.0),
        min_intensity=spec.min_intensity,
        ratio_to=spec.ratio_to,
        expected_ratio=spec.expected_ratio,
    )


def _with_transitions(
    config: Config, ions: tuple[ExpectedIonResult, ...], chromatograms: ChromatogramSet | None
) -> tuple[tuple[ExpectedIonResult, ...], list[str]]:
    """Spectrum ions and transitions together, in the config's order, and the transitions' notes."""
    if not any(spec.is_transition for spec in config.expected_ions):
        return ions, []
    found = chromatograms if chromatograms is not None else transition_set(config)
    by_name, notes = transition_results(found, searchable=found.transition_count > 0)
    by_name.update((ion.name, ion) for ion in ions)
    return tuple(by_name[spec.ion.name] for spec in config.expected_ions), notes


def damaged_note(count: int) -> str:
    """The run's one note on spectra read as empty because their peak arrays were unusable."""
    what = "spectrum" if count == 1 else "spectra"
    return (
        f"{count} {what} without usable peak arrays (an m/z or intensity array missing, or "
        "fewer values than declared); counted as empty"
    )


class _Tally:
    """The scans, passed through, counted: how many there were and how many were damaged."""

    def __init__(self, scans: Iterable[Scan]) -> None:
        self._scans = scans
        self.count = 0
        self.damaged = 0

    def __iter__(self) -> Iterator[Scan]:
        for scan in self._scans:
            self.count += 1
            self.damaged += scan.arrays_damaged
            yield scan


def _searched_ions(
    expected: list[XicTrace], polarities: Counter[int | None], signal: SignalMetrics
) -> tuple[tuple[ExpectedIonResult, ...], list[str]]:
    """Each expected ion's result, and notes for the ones not searched or not in the run.

    An ion of the other polarity than every MS1 scan cannot be looked for at all (a lab with
    positive and negative QC runs keeps both ions in one config): None, not missing. An ion
    whose RT window held no MS1 scan stays "not found" (a run cut short by a failing spray
    must still alarm); its note tells an operator whether the method or the config is at fault.
    """
    span = (
        f"{signal.rt_start_s / 60:.2f}-{signal.rt_end_s / 60:.2f} min"
        if signal.rt_start_s is not None and signal.rt_end_s is not None
        else "unknown"
    )
    results: list[ExpectedIonResult] = []
    polarity_notes: list[str] = []
    window_notes: list[str] = []
    for xic in expected:
        if not _has_polarity_scans(xic.ion, polarities):
            results.append(absent(xic.ion, searched=False))
            sign = "positive" if xic.ion.charge > 0 else "negative"
            polarity_notes.append(
                f"expected ion {xic.ion.name}: the run has no {sign} MS1 scans; not searched"
            )
            continue
        results.append(xic.summary())
        if xic.scans_in_window == 0 and xic.window_s is not None:
            lo, hi = xic.window_s
            window_notes.append(
                f"expected ion {xic.ion.name}: no MS1 scan in its RT window "
                f"{lo / 60:g}-{hi / 60:g} min (the run spans {span}); reported not found"
            )
    return tuple(results), polarity_notes + window_notes


def _resolve_all(
    config: Config, key: str, which: list[ExpectedIon] | None = None
) -> list[ResolvedIon]:
    """Resolve the calibrants, or the expected ions ``which`` (default: the spectrum ions)."""
    if key == "calibrants":
        numbered: list[tuple[int, IonSpec]] = list(enumerate(config.calibrants))
    else:
        chosen = (
            which if which is not None else [s for s in config.expected_ions if not s.is_transition]
        )
        names = {spec.ion.name for spec in chosen}
        numbered = [
            (i, spec.ion) for i, spec in enumerate(config.expected_ions) if spec.ion.name in names
        ]
    resolved: list[ResolvedIon] = []
    problems: list[ConfigProblem] = []
    for i, spec in numbered:
        try:
            resolved.append(resolve(spec, resolving_power=config.instrument.resolving_power))
        except ValueError as exc:
            source = str(config.source) if config.source is not None else "<config>"
            problems.append(ConfigProblem(source, None, f"{key}[{i}]", str(exc)))
    if problems:
        raise ConfigError(problems)
    return resolved


def _has_polarity_scans(ion: ResolvedIon, polarities: Counter[int | None]) -> bool:
    """Whether any MS1 scan of the run is searched for ``ion`` (same rule as _polarity_matches)."""
    return polarities[None] > 0 or polarities[1 if ion.charge > 0 else -1] > 0


def _polarity_matches(ion: ResolvedIon, scan: Scan) -> bool:
    """A positive ion is searched in positive or unlabelled scans, a negative one likewise."""
    return scan.polarity is None or (scan.polarity > 0) == (ion.charge > 0)


def _parse_acquired_at(text: str | None) -> datetime | None:
    """The run start as an aware UTC datetime; a stamp without zone is taken as UTC."""
    if not text:
        return None
    try:
        stamp = datetime.fromisoformat(text.strip())
    except ValueError:
        return None
    if stamp.tzinfo is None:
        stamp = stamp.replace(tzinfo=UTC)
    return stamp.astimezone(UTC)
