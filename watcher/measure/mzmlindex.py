"""Index-guided reading of indexedmzML: byte offsets from the file's own index, MS2 never decoded.

The offset index at the end of the file gives each spectrum's position; every offset is checked
to land on the ``<spectrum`` it names, in order, with nothing left out, and any doubt returns
None so the caller streams instead. Headers are read with ``os.pread`` (most straight from the
bytes, the rest parsed as XML fragments); only MS1 spectra are read whole. This is
PERFORMANCE.md's method h; never pyteomics' byte indexer (RELIABILITY.md, item 1).
"""

from __future__ import annotations

import itertools
import os
import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from watcher.measure import mzml
from watcher.measure.scan import Scan

_MS_LEVEL_RE = re.compile(rb'accession="MS:1000511"[^>]*?value="(\d+)"')
_INDEX_OFFSET_RE = re.compile(rb"<indexListOffset>\s*(\d+)\s*</indexListOffset>")
_ID_RE = re.compile(rb'\sid="([^"]*)"')
_INDEX_ATTR_RE = re.compile(rb'\sindex="(\d+)"')
_INDEX_BLOCK_RE = re.compile(rb'<index\s+name="([^"]*)"\s*>(.*?)</index>', re.S)
_OFFSET_ENTRY_RE = re.compile(rb"<offset\s([^>]*)>\s*(\d+)\s*</offset>")
_ID_REF_RE = re.compile(rb'\bidRef="([^"]*)"')
_HEAD_BYTES = 512  # the spectrum start tag and its first cvParams (ms level) fit in this
_MAX_INDEX_BYTES = 256 * 1024 * 1024


@dataclass(frozen=True, slots=True)
class OffsetIndex:
    """Byte ranges of the spectra, from the file's own index, checked to land on ``<spectrum``."""

    starts: tuple[int, ...]
    ends: tuple[int, ...]  # exclusive bound for each spectrum's bytes (next element's offset)


def load_offset_index(fd: int, size: int) -> OffsetIndex | None:
    """Read and check the embedded offset index; None on any doubt (then stream instead).

    Args:
        fd: an open file descriptor of a plain (not compressed) indexedmzML file.
        size: its size in bytes.
    """
    tail = os.pread(fd, 4096, max(0, size - 4096))
    offsets = _INDEX_OFFSET_RE.findall(tail)
    if not offsets:
        return None
    index_at = int(offsets[-1])
    if not 0 < index_at < size or size - index_at > _MAX_INDEX_BYTES:
        return None
    block = os.pread(fd, size - index_at, index_at)
    end = block.find(b"</indexList>")
    if end < 0:
        return None
    index_list = block[:end]
    # Read with regular expressions, not a tree: 40 000 offsets as lxml elements cost ~15 MB.
    blocks = _INDEX_BLOCK_RE.findall(index_list)
    if len(blocks) != index_list.count(b"<index "):
        return None
    spectra: list[tuple[int, bytes]] = []
    others: list[int] = [index_at]
    for name, body in blocks:
        entries = _OFFSET_ENTRY_RE.findall(body)
        if len(entries) != body.count(b"<offset"):
            return None  # an entry we cannot read: doubt
        for attributes, value in entries:
            if name == b"spectrum":
                ref_match = _ID_REF_RE.search(attributes)
                spectra.append((int(value), ref_match.group(1) if ref_match else b""))
            else:
                others.append(int(value))
    starts = [value for value, _ref in spectra]
    if not starts:
        return None  # an empty spectrum index proves nothing: stream and see
    if any(b <= a for a, b in itertools.pairwise(starts)):
        return None
    if starts and starts[-1] >= index_at:
        return None
    for position, (value, id_ref) in enumerate(spectra):
        head = os.pread(fd, _HEAD_BYTES, value)
        if not head.startswith(b"<spectrum") or head[9:10] not in (b" ", b"\t", b"\n", b"\r"):
            return None
        start_tag = head[: head.find(b">") + 1] if b">" in head else head
        found = _ID_RE.search(start_tag)
        if found is None or _unescape(found.group(1)) != _unescape(id_ref):
            return None
        # index="i" must count 0, 1, 2 ...: a spectrum left out of the index would break it.
        number = _INDEX_ATTR_RE.search(start_tag)
        if number is None or int(number.group(1)) != position:
            return None
    bounds = sorted(set(others))
    ends = []
    for i, start in enumerate(starts):
        if i + 1 < len(starts):
            ends.append(starts[i + 1])
        else:
            ends.append(next((b for b in bounds if b > start), index_at))
    if starts and not _ends_spectrum_list(os.pread(fd, ends[-1] - starts[-1], starts[-1])):
        return None  # spectra after the last indexed one: the index is not the whole story
    return OffsetIndex(tuple(starts), tuple(ends))


def _ends_spectrum_list(last: bytes) -> bool:
    cut = last.rfind(b"</spectrum>")
    if last.count(b"<spectrum ") != 1 or last.count(b"</spectrum>") != 1:
        return False
    return last[cut + len(b"</spectrum>") :].lstrip().startswith(b"</spectrumList>")


def _unescape(value: bytes) -> bytes:
    return (
        value.replace(b"&quot;", b'"')
        .replace(b"&apos;", b"'")
        .replace(b"&lt;", b"<")
        .replace(b"&gt;", b">")
        .replace(b"&amp;", b"&")
    )


def peek_ms_level(head: bytes) -> int | None:
    """The ms level written as a direct cvParam in the first bytes of a spectrum, if any."""
    match = _MS_LEVEL_RE.search(head)
    return int(match.group(1)) if match else None


def indexed_scans(
    fd: int,
    index: OffsetIndex,
    pre: mzml.Preamble,
    *,
    want_arrays: bool,
    parse: Any,
    on_offset: Any = None,
) -> Iterator[Scan]:
    """One Scan per indexed spectrum: header bytes for all, whole elements only for MS1 arrays."""
    for i, (start, end) in enumerate(zip(index.starts, index.ends, strict=True)):
        if on_offset is not None:
            on_offset(start)
        level = peek_ms_level(os.pread(fd, _HEAD_BYTES, start))
        if level == 1 and want_arrays:
            data = _whole_element(os.pread(fd, end - start, start), i)
            yield _ms1_with_arrays(data, i, pre, parse)
            continue
        header = _header_fragment(fd, start, end, i)
        scan = fast_header(header, i)
        needs_arrays = False
        if scan is None:
            scan, needs_arrays = mzml.scan_from_element(
                parse(header), index=i, groups=pre.groups, want_arrays=want_arrays
            )
        elif want_arrays and scan.ms_level == 1:
            needs_arrays = True
        if needs_arrays:  # ms level came from a param group or late in the header: MS1 after all
            data = _whole_element(os.pread(fd, end - start, start), i)
            scan = _ms1_with_arrays(data, i, pre, parse)
        yield scan


def _ms1_with_arrays(data: bytes, i: int, pre: mzml.Preamble, parse: Any) -> Scan:
    cut = data.find(b"<binaryDataArrayList")
    scan = fast_header(data[:cut], i) if cut >= 0 else None
    if scan is None:
        scan, _ = mzml.scan_from_element(parse(data), index=i, groups=pre.groups, want_arrays=True)
        return scan
    close = data.rfind(b"</binaryDataArrayList>")
    if close < cut:
        raise mzml.SpectrumError(f"spectrum {i}: <binaryDataArrayList> is not closed")
    arrays = parse(data[cut : close + len(b"</binaryDataArrayList>")])
    length_match = _LENGTH_RE.search(data, 0, data.find(b">") + 1)
    length = int(length_match.group(1)) if length_match else 0
    where = f"spectrum {i} ({_spectrum_id(data)})"
    mzml.decode_arrays(arrays, scan, pre.groups, where, length)
    return scan


# Header cvParams as mzML writers lay them out (accession, name, value[, unitCvRef,
# unitAccession]). Anything else -- another order, param groups, escapes in a number -- is
# left to the XML parse, which handles every form; this only saves parsing 9 of 10 spectra.
_WANTED = rb"MS:1000(?:511|579|127|128|130|129|285|504|505|016|927|744|041|827)"
_WANTED_RE = re.compile(rb'accession="' + _WANTED + rb'"')
_FAST_RE = re.compile(
    rb'accession="(' + _WANTED + rb')" name="[^"<>]*" value="([^"<>]*)"'
    rb'(?: unitCvRef="[^"<>]*" unitAccession="([^"<>]*)")?'
)
_LENGTH_RE = re.compile(rb'\sdefaultArrayLength="(\d+)"')
_UNIT_NEEDED = frozenset({mzml.SCAN_START_TIME, mzml.INJECTION_TIME})


def fast_header(header: bytes, index: int) -> Scan | None:
    """Header scalars straight from the bytes of a canonically written spectrum header.

    Returns None (parse the XML instead) whenever the bytes are not in the plain layout.
    """
    if b"referenceableParamGroupRef" in header or b"&" in header:
        return None
    found = _FAST_RE.findall(header)
    if len(found) != len(_WANTED_RE.findall(header)):
        return None
    values: dict[str, tuple[bytes, bytes]] = {}
    for accession, value, unit in found:
        values.setdefault(accession.decode(), (value, unit))
    if any(acc in values and not values[acc][1] for acc in _UNIT_NEEDED):
        return None  # a time without unitAccession: let the XML path read unitName
    try:
        level_text = values.get(mzml.MS_LEVEL, (b"", b""))[0]
        ms_level = int(level_text) if level_text else (1 if mzml.MS1_SPECTRUM in values else None)
        scan = Scan(
            index=index,
            ms_level=ms_level,
            rt_s=None,
            tic=_num(values, mzml.TIC),
            base_peak_mz=_num(values, mzml.BASE_PEAK_MZ),
            base_peak_intensity=_num(values, mzml.BASE_PEAK_INTENSITY),
            is_profile=True
            if mzml.PROFILE in values
            else False
            if mzml.CENTROID in values
            else None,
            polarity=1 if mzml.POSITIVE in values else -1 if mzml.NEGATIVE in values else None,
            injection_time_ms=None,
            precursor_mz=_num(values, mzml.SELECTED_ION_MZ),
        )
        if mzml.SCAN_START_TIME in values:
            value_s = _num(values, mzml.SCAN_START_TIME)
            factor = mzml.TIME_UNITS_S.get(values[mzml.SCAN_START_TIME][1].decode())
            scan.rt_s = None if value_s is None or factor is None else value_s * factor
        if mzml.INJECTION_TIME in values:
            value_ms = _num(values, mzml.INJECTION_TIME)
            factor = mzml.TIME_UNITS_S.get(values[mzml.INJECTION_TIME][1].decode())
            if value_ms is not None:
                scan.injection_time_ms = value_ms if factor is None else value_ms * factor * 1e3
        charge = _num(values, mzml.CHARGE_STATE)
        scan.precursor_charge = None if charge is None else int(charge)
        if scan.precursor_mz is None:
            scan.precursor_mz = _num(values, mzml.ISOLATION_TARGET_MZ)
    except ValueError:
        return None  # let the XML path name the bad value
    return scan


def _num(values: dict[str, tuple[bytes, bytes]], accession: str) -> float | None:
    value = values.get(accession, (b"", b""))[0]
    return float(value) if value else None


def _spectrum_id(data: bytes) -> str:
    found = _ID_RE.search(data, 0, data.find(b">") + 1)
    return found.group(1).decode("utf-8", "replace") if found else "?"


class IndexDoubt(Exception):
    """The offset index disagrees with the bytes at spectrum ``position``: stream from there."""

    def __init__(self, position: int) -> None:
        super().__init__(position)
        self.position = position


def _whole_element(data: bytes, i: int) -> bytes:
    cut = data.rfind(b"</spectrum>")
    if cut < 0 or data.count(b"</spectrum>") != 1:
        raise IndexDoubt(i)  # not exactly one spectrum between two offsets
    return data[: cut + len(b"</spectrum>")]


def _header_fragment(fd: int, start: int, end: int, i: int) -> bytes:
    """The spectrum's bytes before ``<binaryDataArrayList``, closed, as a parsable fragment."""
    want = 4096
    while True:
        data = os.pread(fd, min(want, end - start), start)
        cut = data.find(b"<binaryDataArrayList")
        if cut >= 0:
            return data[:cut] + b"</spectrum>"
        if len(data) >= end - start:
            return _whole_element(data, i)
        want *= 4
