"""mzML chromatograms to Chromatogram records: type, isolation targets, time and intensity arrays.

Everything is keyed on PSI-MS CV accessions (tests/data/mzml-cv-terms.tsv): the chromatogram
type (MS:1000626 children), the precursor's and product's isolation window target m/z
(MS:1000827, with the selected ion m/z MS:1000744 as fallback for the precursor), the time array
(MS:1000595) with its unit accession (UO:0000010 second, UO:0000031 minute, ...) and the
intensity array (MS:1000515). Arrays are decoded by ``watcher.measure.readers.arrays`` (none,
zlib, MS-Numpress), so a damaged array is an error naming the chromatogram.

Two ways in, as for spectra: ``stream_chromatograms`` continues an iterparse of the whole file
after its spectra (plain mzML, mzML.gz, chromatogram-only files); ``region_events`` parses only
the ``<chromatogramList>`` of an indexedmzML whose spectra were read through the offset index,
so the spectra are never parsed a second time.
"""

from __future__ import annotations

import io
import os
import re
from typing import TYPE_CHECKING, Any

import numpy as np

from watcher.measure import chromatogram as kinds
from watcher.measure.chromatogram import Chromatogram
from watcher.measure.readers import cv, safexml
from watcher.measure.readers.arrays import (
    DTYPES,
    KNOWN_COMPRESSIONS,
    ArrayDecodeError,
    decode_array,
)
from watcher.measure.readers.mzml import (
    INTENSITY_ARRAY,
    ISOLATION_TARGET_MZ,
    SELECTED_ION_MZ,
    TIME_UNITS_S,
    Groups,
    Param,
    SpectrumError,
    UnsupportedCompression,
    local_name,
    param_values,
)

if TYPE_CHECKING:
    from collections.abc import Iterator

TIME_ARRAY = "MS:1000595"
# Chromatogram type accession -> kind (PSI-MS CV, MS:1000626 chromatogram type).
KINDS = {
    "MS:1000235": kinds.TIC,
    "MS:1001473": kinds.SRM,
    "MS:1000627": kinds.SIC,
    "MS:1001472": kinds.SIM,
    "MS:1000628": kinds.BPC,
}
_TIME_UNIT_NAMES_S = {"second": 1.0, "minute": 60.0, "millisecond": 1e-3, "hour": 3600.0}
_TAGS = ("{*}chromatogram", "{*}chromatogramList", "{*}run")
_PARTS = ("{*}precursor", "{*}product", "{*}binaryDataArrayList")


class ChromatogramError(SpectrumError):
    """A chromatogram's content cannot be used; the message names the chromatogram, no paths."""


def stream_chromatograms(
    events: Iterator[tuple[str, Any]], groups: Groups
) -> Iterator[Chromatogram]:
    """Continue iterparse events: one Chromatogram per ``<chromatogram>``, in file order.

    Stops at the end of the ``<chromatogramList>`` (or of the run); each element is cleared
    behind us, so memory stays flat with the number of chromatograms.
    """
    index = 0
    for event, element in events:
        name = local_name(element.tag)
        if name == "chromatogram":
            if event != "end":
                continue
            yield chromatogram_from_element(element, index=index, groups=groups)
            index += 1
            element.clear()
            parent = element.getparent()
            if parent is not None:
                while element.getprevious() is not None:
                    del parent[0]
        elif event == "end" and name in ("chromatogramList", "run"):
            return


def chromatogram_from_element(element: Any, *, index: int, groups: Groups) -> Chromatogram:
    """Build a Chromatogram from a whole ``<chromatogram>`` element.

    Raises:
        ChromatogramError: an array is missing, damaged or of an unknown unit; a target m/z is
            not a number (the message names the chromatogram).
        UnsupportedCompression: an array compression this reader cannot decode.
    """
    where = f"chromatogram {index} ({element.get('id', '?')})"
    params = param_values(element, groups)
    kind = next((KINDS[acc] for acc in params if acc in KINDS), kinds.OTHER)
    precursor_mz = product_mz = None
    arrays: dict[str, np.ndarray] = {}
    length = _int_attr(element, "defaultArrayLength", 0)
    # iterchildren's tag filter runs in C: a targeted run has thousands of chromatograms
    for child in element.iterchildren(*_PARTS):
        name = local_name(child.tag)
        if name == "precursor":
            precursor_mz = _target_mz(child, groups, where, fallback=True)
        elif name == "product":
            product_mz = _target_mz(child, groups, where, fallback=False)
        else:
            arrays = _arrays(child, groups, where, length)
    time_s = arrays.get(TIME_ARRAY)
    intensity = arrays.get(INTENSITY_ARRAY)
    if time_s is None or intensity is None:
        if length != 0:
            raise ChromatogramError(f"{where}: time or intensity array missing")
        time_s = intensity = np.zeros(0, dtype=np.float64)
    if time_s.size != intensity.size:
        raise ChromatogramError(f"{where}: {time_s.size} times but {intensity.size} intensities")
    if time_s.size > 1 and np.any(time_s[1:] < time_s[:-1]):
        order = np.argsort(time_s, kind="stable")
        time_s, intensity = time_s[order], intensity[order]
    return Chromatogram(
        index=index,
        id=str(element.get("id", "")),
        kind=kind,
        precursor_mz=precursor_mz,
        product_mz=product_mz,
        time_s=time_s,
        intensity=intensity,
    )


def _number(params: dict[str, Param], accession: str, where: str) -> float | None:
    param = params.get(accession)
    if param is None or param[1] == "":
        return None
    try:
        return float(param[1])
    except ValueError:
        raise ChromatogramError(
            f"{where}: {accession} value {param[1][:40]!r} is not a number"
        ) from None


def _target_mz(part: Any, groups: Groups, where: str, *, fallback: bool) -> float | None:
    window = part.find("{*}isolationWindow")
    target = (
        None
        if window is None
        else _number(param_values(window, groups), ISOLATION_TARGET_MZ, where)
    )
    if target is not None or not fallback:
        return target
    ion = part.find("{*}selectedIonList/{*}selectedIon")
    return None if ion is None else _number(param_values(ion, groups), SELECTED_ION_MZ, where)


def _arrays(
    array_list: Any, groups: Groups, where: str, default_length: int
) -> dict[str, np.ndarray]:
    out: dict[str, np.ndarray] = {}
    for bda in array_list.iterchildren("{*}binaryDataArray"):
        params = param_values(bda, groups)
        kind = (
            TIME_ARRAY
            if TIME_ARRAY in params
            else INTENSITY_ARRAY
            if INTENSITY_ARRAY in params
            else None
        )
        if kind is None or kind in out:
            continue  # other arrays (ms level, noise, ...) are not needed
        what = "time array" if kind == TIME_ARRAY else "intensity array"
        dtype = next((DTYPES[acc] for acc in params if acc in DTYPES), None)
        if dtype is None:
            raise ChromatogramError(f"{where}: {what} has no known binary data type")
        binary = bda.find("{*}binary")
        expected = _int_attr(bda, "arrayLength", default_length)
        try:
            values = decode_array(
                None if binary is None else binary.text,
                compression=_compression(params, where),
                dtype=dtype,
                expected_length=expected,
            )
        except ArrayDecodeError as exc:
            raise ChromatogramError(f"{where}: {what}: {exc}") from None
        if kind == TIME_ARRAY:
            values = values * _time_factor_s(params[TIME_ARRAY], where)
        out[kind] = values
    return out


def _time_factor_s(param: Param, where: str) -> float:
    _acc, _value, unit_acc, unit_name = param
    if unit_acc:
        factor = TIME_UNITS_S.get(unit_acc)
    elif unit_name:
        factor = _TIME_UNIT_NAMES_S.get(unit_name.lower())
    else:
        return 1.0  # no unit at all: mzML's default time unit is the second
    if factor is None:
        raise ChromatogramError(
            f"{where}: time array unit {unit_acc or unit_name!r} is not a unit of time"
        )
    return factor


def _compression(params: dict[str, Param], where: str) -> str:
    known = [acc for acc in params if acc in KNOWN_COMPRESSIONS]
    if known:
        return known[0]
    for acc in params:
        if acc.startswith("MS:") and acc not in DTYPES and cv.is_compression_term(acc):
            name = cv.term_name(acc) or acc
            raise UnsupportedCompression(
                f"{where}: array compression {acc} ({name}) is not supported"
            )
    raise ChromatogramError(f"{where}: array has no compression term (MS:1000572 child)")


def _int_attr(element: Any, name: str, default: int) -> int:
    text = element.get(name)
    return int(text) if text and text.isdigit() else default


# --- the chromatogram list of an indexedmzML ---------------------------------------------------

_INDEX_OFFSET_RE = re.compile(rb"<indexListOffset>\s*(\d+)\s*</indexListOffset>")
_LIST_END = b"</chromatogramList>"
_TAIL_BYTES = 64 * 1024  # </chromatogramList></run></mzML> sit just before the index


def chromatogram_region(fd: int, size: int, after: int, last_end: int) -> tuple[int, int] | None:
    """Byte range of the ``<chromatogramList>`` element of an indexedmzML; None when it has none.

    Args:
        fd: the open file.
        size: its size.
        after: where the last spectrum starts (its bytes hold ``</spectrumList>``).
        last_end: where the index says the next element after it starts.
    """
    head = os.pread(fd, max(0, last_end - after), after)
    start = head.find(b"<chromatogramList")
    if start < 0:
        return None
    tail = os.pread(fd, 4096, max(0, size - 4096))
    offsets = _INDEX_OFFSET_RE.findall(tail)
    if not offsets:
        return None
    index_at = int(offsets[-1])
    lo = max(after + start, index_at - _TAIL_BYTES)
    block = os.pread(fd, max(0, index_at - lo), lo)
    close = block.rfind(_LIST_END)
    if close < 0:
        return None
    return after + start, lo + close + len(_LIST_END)


def region_events(fd: int, start: int, end: int) -> Iterator[tuple[str, Any]]:
    """iterparse events of the bytes ``start:end`` of the file (one ``<chromatogramList>``)."""
    return safexml.safe_iterparse(_Range(fd, start, end), events=("start", "end"), tag=_TAGS)


class _Range(io.RawIOBase):
    """The bytes ``start:end`` of an open file, read with ``pread`` (the file position is left)."""

    def __init__(self, fd: int, start: int, end: int) -> None:
        super().__init__()
        self._fd = fd
        self._at = start
        self._end = end

    def readable(self) -> bool:
        return True

    def read(self, size: int = -1) -> bytes:
        left = self._end - self._at
        want = left if size is None or size < 0 else min(size, left)
        if want <= 0:
            return b""
        data = os.pread(self._fd, want, self._at)
        self._at += len(data)
        return data
