"""One spectrum as the readers hand it to the metric code: header scalars plus, for MS1, arrays.

This is internal to ``watcher.measure`` (it holds numpy arrays, so it is not a stage record).
Readers fill what the file carries and leave the rest None; they decode arrays only when
asked (``want_arrays`` for MS1), so MS2 spectra never cost a decode.

Of a spectrum that is not MS1 the metrics read only ``NON_MS1_FIELDS`` (counts, RT range,
injection time, precursor charge); a reader may leave its other header fields None, and the
index-guided mzML reader does, to read a tenth of the bytes per MS2 header.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]

NON_MS1_FIELDS = (
    "index",
    "ms_level",
    "rt_s",
    "injection_time_ms",
    "precursor_mz",
    "precursor_charge",
)


@dataclass(slots=True, kw_only=True)
class Scan:
    index: int  # 0-based position in the file
    ms_level: int | None  # None: unknown (MGF spectra are treated as MS2)
    rt_s: float | None  # scan start time in seconds; None when the file gives none
    tic: float | None  # header TIC, or the array sum when arrays were decoded and no header
    base_peak_mz: float | None
    base_peak_intensity: float | None
    injection_time_ms: float | None = None
    precursor_mz: float | None = None
    precursor_charge: int | None = None
    is_profile: bool | None = None  # None: not stated
    polarity: int | None = None  # +1, -1 or None
    mz: FloatArray | None = None  # sorted ascending (readers sort if needed)
    intensity: FloatArray | None = None
    # The spectrum's peak arrays were missing or shorter than declared: it is read as empty
    # (no peaks) and counted for the run's note, not a reason to refuse the whole file.
    arrays_damaged: bool = False


@dataclass(slots=True, kw_only=True)
class RunHeader:
    """What a reader learns about the whole run before or while streaming it."""

    format: str  # "mzML", "mzML.gz", "mzXML", "MGF"
    acquired_at_iso: str | None = None  # run startTimeStamp as written, ISO-8601
    n_spectra_declared: int | None = None
    # SHA-1 fileChecksum of an indexedmzML against its bytes; None: none written, or another
    # format. Known once the scans are consumed (a .gz is hashed in the reading pass).
    checksum_ok: bool | None = None
    # What the reader had to work around in a whole file (a stale index); filled while the
    # scans are consumed, read after the last one.
    notes: list[str] = field(default_factory=list)
