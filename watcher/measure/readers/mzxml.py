"""mzXML scans to Scan records through pyteomics' sequential reader; MS1 arrays on request.

The embedded index of mzXML is never used: excerpts and damaged files carry offsets far past
their end (tests/data/README.md, mzxml). Nested MS2 ``<scan>`` elements come out in
file order. pyteomics gives retention time in minutes; it is turned into seconds here.
"""

from __future__ import annotations

from typing import IO, TYPE_CHECKING, Any

import numpy as np
from pyteomics import mzxml

from watcher.measure.scan import Scan

if TYPE_CHECKING:
    from collections.abc import Iterator


class _Reader(mzxml.MzXML):  # type: ignore[misc]
    """pyteomics' sequential mzXML reader, except that a scan with an empty ``<peaks/>`` is a
    scan without peaks: pyteomics 5.0 raises KeyError('m/z array') on it, which would make
    the whole file unreadable for one empty scan (instrument software writes them for scans
    that recorded nothing)."""

    def _decode_peaks(self, info: dict[str, Any]) -> None:
        peaks = info.get("peaks")
        first = peaks[0] if isinstance(peaks, list) and peaks else peaks
        if isinstance(peaks, dict | list) and not (
            isinstance(first, dict) and all(k in first for k in self._array_keys)
        ):
            info.pop("peaks")
            for key in self._array_keys:
                info[key] = None
            return
        super()._decode_peaks(info)


def read_scans(source: IO[bytes], *, want_arrays: bool) -> Iterator[Scan]:
    """Yield one Scan per ``<scan>``; arrays decoded only for MS1 when ``want_arrays``."""
    with _Reader(source, use_index=False, decode_binary=False, huge_tree=False) as reader:
        for index, record in enumerate(reader):
            yield _scan(record, index, want_arrays=want_arrays)


def _scan(record: dict[str, Any], index: int, *, want_arrays: bool) -> Scan:
    level = record.get("msLevel")
    ms_level = None if level is None else int(level)
    polarity = {"+": 1, "-": -1}.get(str(record.get("polarity", "")))
    precursor_mz = precursor_charge = None
    precursors = record.get("precursorMz") or []
    if precursors:
        first = precursors[0]
        precursor_mz = _float(first.get("precursorMz"))
        charge = first.get("precursorCharge")
        precursor_charge = None if charge is None else int(charge)
    centroided = record.get("centroided")
    scan = Scan(
        index=index,
        ms_level=ms_level,
        rt_s=_rt_s(record.get("retentionTime")),
        tic=_float(record.get("totIonCurrent")),
        base_peak_mz=_float(record.get("basePeakMz")),
        base_peak_intensity=_float(record.get("basePeakIntensity")),
        precursor_mz=precursor_mz,
        precursor_charge=precursor_charge,
        polarity=polarity,
        is_profile=None if centroided is None else not bool(int(centroided)),
    )
    if want_arrays and ms_level == 1:
        mz = _decoded(record.get("m/z array"))
        intensity = _decoded(record.get("intensity array"))
        declared = _int(record.get("peaksCount"))
        if mz.size != intensity.size or (declared is not None and mz.size < declared):
            # Peaks missing or fewer than peaksCount says: the scan is read as empty and
            # counted (RunMetrics notes), so one damaged scan does not lose the run.
            scan.arrays_damaged = True
            mz = intensity = np.zeros(0, dtype=np.float64)
        if mz.size > 1 and np.any(mz[1:] < mz[:-1]):
            order = np.argsort(mz, kind="stable")
            mz, intensity = mz[order], intensity[order]
        scan.mz, scan.intensity = mz, intensity
        if scan.tic is None:
            scan.tic = float(intensity.sum())
        if scan.base_peak_intensity is None and intensity.size:
            top = int(np.argmax(intensity))
            scan.base_peak_mz, scan.base_peak_intensity = float(mz[top]), float(intensity[top])
    return scan


def _decoded(record: Any) -> np.ndarray:
    if record is None:
        return np.zeros(0, dtype=np.float64)
    values = record.decode() if hasattr(record, "decode") else record
    return np.asarray(values, dtype=np.float64)


def _rt_s(value: Any) -> float | None:
    if value is None:
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        # pyteomics leaves a duration it cannot convert as text: "-PT1S" is a negative one.
        text = str(value).strip()
        if text.startswith("-"):
            return None
        raise ValueError(f"retentionTime {text[:40]!r} is not an xs:duration") from None
    if number < 0:
        return None  # a negative time is a writer's "unknown" (-1 is the usual sentinel)
    value = value if hasattr(value, "unit_info") else number
    unit = getattr(getattr(value, "unit_info", None), "lower", lambda: "minute")()
    # pyteomics converts the xs:duration (PT353.43S) to minutes and says so in unit_info.
    factor = 1.0 if unit.startswith("second") else 60.0
    return float(value) * factor


def _int(value: Any) -> int | None:
    try:
        return None if value is None else int(value)
    except (TypeError, ValueError):
        return None


def _float(value: Any) -> float | None:
    return None if value is None else float(value)
