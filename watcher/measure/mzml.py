"""mzML spectra to Scan records: cvParams by accession, MS1 arrays decoded on request.

Two ways through a file, one element decoder (``scan_from_element``):

* index-guided (indexedmzML): the embedded offset index gives every spectrum's byte offset; the
  header part of each spectrum is read with ``os.pread`` and parsed alone, and only MS1
  spectra are read whole, so MS2 peak data is never read (PERFORMANCE.md, method h);
* streaming (plain mzML, mzML.gz, or any doubt about the index): lxml iterparse, one spectrum
  element at a time, cleared behind us so memory stays flat.

Never pyteomics' byte indexer, which is quadratic on crafted input (RELIABILITY.md, item 1).
"""

from __future__ import annotations

import itertools
import os
import re
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from watcher.measure import cv
from watcher.measure.numpress import DTYPES, KNOWN_COMPRESSIONS, ArrayDecodeError, decode_array
from watcher.measure.scan import Scan

# Accessions (shared/reference/mzml-cv-terms.tsv).
MS_LEVEL = "MS:1000511"
MS1_SPECTRUM = "MS:1000579"
MSN_SPECTRUM = "MS:1000580"
CENTROID = "MS:1000127"
PROFILE = "MS:1000128"
POSITIVE = "MS:1000130"
NEGATIVE = "MS:1000129"
TIC = "MS:1000285"
BASE_PEAK_MZ = "MS:1000504"
BASE_PEAK_INTENSITY = "MS:1000505"
SCAN_START_TIME = "MS:1000016"
INJECTION_TIME = "MS:1000927"
SELECTED_ION_MZ = "MS:1000744"
CHARGE_STATE = "MS:1000041"
ISOLATION_TARGET_MZ = "MS:1000827"
MZ_ARRAY = "MS:1000514"
INTENSITY_ARRAY = "MS:1000515"

# Unit accession -> factor to seconds (UO terms).
_TIME_UNITS_S = {"UO:0000010": 1.0, "UO:0000031": 60.0, "UO:0000028": 1e-3, "UO:0000032": 3600.0}
_TIME_UNIT_NAMES_S = {"second": 1.0, "minute": 60.0, "millisecond": 1e-3, "hour": 3600.0}
_MS_LEVEL_RE = re.compile(rb'accession="MS:1000511"[^>]*?value="(\d+)"')

Param = tuple[str, str, str | None, str | None]  # accession, value, unit accession, unit name
Groups = dict[str, list[Param]]


class SpectrumError(ValueError):
    """A spectrum's content cannot be used; the message names the spectrum, no paths."""


@dataclass(slots=True)
class _Params:
    values: dict[str, Param] = field(default_factory=dict)

    def add(self, params: Iterable[Param]) -> None:
        for param in params:
            self.values.setdefault(param[0], param)

    def has(self, accession: str) -> bool:
        return accession in self.values

    def number(self, accession: str, where: str) -> float | None:
        param = self.values.get(accession)
        if param is None or param[1] == "":
            return None
        try:
            return float(param[1])
        except ValueError:
            raise SpectrumError(
                f"{where}: {accession} value {param[1][:40]!r} is not a number"
            ) from None


def local_name(tag: Any) -> str:
    """``{namespace}name`` -> ``name``; comments and PIs (non-string tags) -> ``""``."""
    return tag.rpartition("}")[2] if isinstance(tag, str) else ""


def read_group(element: Any) -> tuple[str, list[Param]]:
    """A ``<referenceableParamGroup>`` -> (id, its cvParams)."""
    return str(element.get("id", "")), list(_cv_params(element))


def _cv_params(element: Any) -> Iterator[Param]:
    for child in element:
        if local_name(child.tag) == "cvParam":
            yield (
                child.get("accession", ""),
                child.get("value", ""),
                child.get("unitAccession"),
                child.get("unitName"),
            )


_PARAM_TAGS = ("{*}cvParam", "{*}referenceableParamGroupRef")


def _params_of(element: Any, groups: Groups) -> _Params:
    # iterchildren's tag filter runs in C: this is the hot loop of every spectrum.
    values: dict[str, Param] = {}
    for child in element.iterchildren(*_PARAM_TAGS):
        get = child.get
        if child.tag.endswith("cvParam"):
            accession = get("accession", "")
            if accession not in values:
                values[accession] = (
                    accession,
                    get("value", ""),
                    get("unitAccession"),
                    get("unitName"),
                )
        else:
            for param in groups.get(get("ref", ""), ()):
                values.setdefault(param[0], param)
    return _Params(values)


def peek_ms_level(head: bytes) -> int | None:
    """The ms level written as a direct cvParam in the first bytes of a spectrum, if any."""
    match = _MS_LEVEL_RE.search(head)
    return int(match.group(1)) if match else None


def scan_from_element(
    element: Any, *, index: int, groups: Groups, want_arrays: bool
) -> tuple[Scan, bool]:
    """Build a Scan from a ``<spectrum>`` element (whole, or header fragment without arrays).

    Returns:
        The scan and whether its arrays still need reading (MS1 wanted but not in ``element``).

    Raises:
        SpectrumError: a value or array cannot be used (message names the spectrum).
    """
    where = f"spectrum {index} ({element.get('id', '?')})"
    params = _params_of(element, groups)
    ms_level = _ms_level(params, where)
    scan = Scan(
        index=index,
        ms_level=ms_level,
        rt_s=None,
        tic=params.number(TIC, where),
        base_peak_mz=params.number(BASE_PEAK_MZ, where),
        base_peak_intensity=params.number(BASE_PEAK_INTENSITY, where),
        is_profile=True if params.has(PROFILE) else False if params.has(CENTROID) else None,
        polarity=1 if params.has(POSITIVE) else -1 if params.has(NEGATIVE) else None,
    )
    arrays_element = None
    for child in element.iterchildren(*_SPECTRUM_PARTS):
        name = local_name(child.tag)
        if name == "scanList":
            _read_scan_list(child, scan, groups, where)
        elif name == "precursorList":
            _read_precursor(child, scan, groups, where)
        elif name == "binaryDataArrayList":
            arrays_element = child
    if not (want_arrays and ms_level == 1):
        return scan, False
    if arrays_element is None:
        return scan, _declared_length(element) > 0
    _decode_arrays(arrays_element, scan, groups, where, _declared_length(element))
    return scan, False


_SPECTRUM_PARTS = ("{*}scanList", "{*}precursorList", "{*}binaryDataArrayList")


def _ms_level(params: _Params, where: str) -> int | None:
    level = params.number(MS_LEVEL, where)
    if level is not None:
        return int(level)
    if params.has(MS1_SPECTRUM):
        return 1
    return None


def _declared_length(element: Any) -> int:
    try:
        return int(element.get("defaultArrayLength", "0"))
    except ValueError:
        return 0


def _read_scan_list(scan_list: Any, scan: Scan, groups: Groups, where: str) -> None:
    for child in scan_list:
        if local_name(child.tag) != "scan":
            continue
        params = _params_of(child, groups)
        rt = params.values.get(SCAN_START_TIME)
        if rt is not None:
            factor = _time_factor_s(rt)
            value = params.number(SCAN_START_TIME, where)
            scan.rt_s = None if factor is None or value is None else value * factor
        injection = params.values.get(INJECTION_TIME)
        if injection is not None:
            value = params.number(INJECTION_TIME, where)
            factor = _time_factor_s(injection)
            if value is not None:
                # Injection time is written in ms (UO:0000028); convert if another unit is given.
                scan.injection_time_ms = value if factor is None else value * factor * 1e3
        return  # the first scan carries the spectrum's time


def _time_factor_s(param: Param) -> float | None:
    _acc, _value, unit_acc, unit_name = param
    if unit_acc:
        return _TIME_UNITS_S.get(unit_acc)
    if unit_name:
        return _TIME_UNIT_NAMES_S.get(unit_name.lower())
    return 1.0  # no unit at all: mzML's default time unit is the second


def _read_precursor(precursor_list: Any, scan: Scan, groups: Groups, where: str) -> None:
    for precursor in precursor_list:
        if local_name(precursor.tag) != "precursor":
            continue
        for part in precursor:
            name = local_name(part.tag)
            if name == "selectedIonList":
                for ion in part:
                    if local_name(ion.tag) == "selectedIon":
                        params = _params_of(ion, groups)
                        scan.precursor_mz = params.number(SELECTED_ION_MZ, where)
                        charge = params.number(CHARGE_STATE, where)
                        scan.precursor_charge = None if charge is None else int(charge)
                        break
            elif name == "isolationWindow" and scan.precursor_mz is None:
                scan.precursor_mz = _params_of(part, groups).number(ISOLATION_TARGET_MZ, where)
        return  # the first precursor is the one selected


def _decode_arrays(
    array_list: Any, scan: Scan, groups: Groups, where: str, default_length: int
) -> None:
    arrays: dict[str, np.ndarray] = {}
    for bda in array_list:
        if local_name(bda.tag) != "binaryDataArray":
            continue
        params = _params_of(bda, groups)
        kind = (
            MZ_ARRAY
            if params.has(MZ_ARRAY)
            else INTENSITY_ARRAY
            if params.has(INTENSITY_ARRAY)
            else None
        )
        if kind is None:
            continue  # other arrays (noise, charge, ...) are not needed
        compression = _compression(params, where)
        dtype = next((DTYPES[acc] for acc in params.values if acc in DTYPES), None)
        if dtype is None:
            raise SpectrumError(f"{where}: {_kind_name(kind)} has no known binary data type")
        binary = next((c for c in bda if local_name(c.tag) == "binary"), None)
        length_text = bda.get("arrayLength")
        expected = int(length_text) if length_text and length_text.isdigit() else default_length
        try:
            arrays[kind] = decode_array(
                None if binary is None else binary.text,
                compression=compression,
                dtype=dtype,
                expected_length=expected,
            )
        except ArrayDecodeError as exc:
            raise SpectrumError(f"{where}: {_kind_name(kind)}: {exc}") from None
    mz = arrays.get(MZ_ARRAY)
    intensity = arrays.get(INTENSITY_ARRAY)
    if mz is None or intensity is None:
        if default_length == 0:
            mz = intensity = np.zeros(0, dtype=np.float64)
        else:
            raise SpectrumError(f"{where}: m/z or intensity array missing")
    if mz.size != intensity.size:
        raise SpectrumError(f"{where}: {mz.size} m/z values but {intensity.size} intensities")
    if mz.size > 1 and np.any(mz[1:] < mz[:-1]):
        order = np.argsort(mz, kind="stable")
        mz, intensity = mz[order], intensity[order]
    scan.mz, scan.intensity = mz, intensity
    if intensity.size:
        top = int(np.argmax(intensity))
        if scan.tic is None:
            scan.tic = float(intensity.sum())
        if scan.base_peak_intensity is None:
            scan.base_peak_mz, scan.base_peak_intensity = float(mz[top]), float(intensity[top])
    elif scan.tic is None:
        scan.tic = 0.0


def _compression(params: _Params, where: str) -> str:
    known = [acc for acc in params.values if acc in KNOWN_COMPRESSIONS]
    if known:
        return known[0]
    for acc in params.values:
        if acc in DTYPES or acc in (MZ_ARRAY, INTENSITY_ARRAY) or not acc.startswith("MS:"):
            continue
        if cv.is_compression_term(acc):
            name = cv.term_name(acc) or acc
            raise UnsupportedCompression(
                f"{where}: array compression {acc} ({name}) is not supported"
            )
    raise SpectrumError(f"{where}: array has no compression term (MS:1000572 child)")


class UnsupportedCompression(SpectrumError):
    """The array uses a compression this reader cannot decode (never read as uncompressed)."""


def _kind_name(kind: str) -> str:
    return "m/z array" if kind == MZ_ARRAY else "intensity array"


# --- traversal ------------------------------------------------------------------------------


@dataclass(slots=True)
class Preamble:
    """What precedes the spectra: param groups, run start time, declared spectrum count."""

    groups: Groups = field(default_factory=dict)
    start_time_stamp: str | None = None
    spectrum_count: int | None = None


_STREAM_TAGS = (
    "{*}referenceableParamGroup",
    "{*}run",
    "{*}spectrumList",
    "{*}spectrum",
    "{*}chromatogramList",
)


def read_preamble(events: Iterator[tuple[str, Any]]) -> Preamble:
    """Consume iterparse events up to the start of ``<spectrumList>`` (or the end of the run)."""
    pre = Preamble()
    for event, element in events:
        name = local_name(element.tag)
        if event == "end" and name == "referenceableParamGroup":
            group_id, params = read_group(element)
            pre.groups[group_id] = params
        elif event == "start" and name == "run":
            pre.start_time_stamp = element.get("startTimeStamp")
        elif event == "start" and name == "spectrumList":
            count = element.get("count", "")
            pre.spectrum_count = int(count) if count.isdigit() else None
            return pre
        elif name in ("chromatogramList", "run"):
            return pre  # no spectra before the chromatograms: a chromatogram-only file
    return pre


def stream_scans(
    events: Iterator[tuple[str, Any]], pre: Preamble, *, want_arrays: bool, skip: int = 0
) -> Iterator[Scan]:
    """Continue iterparse events after ``read_preamble``: one Scan per spectrum, in file order.

    ``skip`` spectra are passed over unparsed (they were already read through the index).
    """
    index = 0
    for event, element in events:
        name = local_name(element.tag)
        if name == "spectrum":
            if event != "end":
                continue
            scan = None
            if index >= skip:
                scan, _missing = scan_from_element(
                    element, index=index, groups=pre.groups, want_arrays=want_arrays
                )
            index += 1
            # Free the element and everything before it: memory stays flat with file size.
            element.clear()
            parent = element.getparent()
            if parent is not None:
                while element.getprevious() is not None:
                    del parent[0]
            if scan is not None:
                yield scan
        elif name in ("spectrumList", "chromatogramList", "run"):
            return  # nothing after the spectra is needed; completeness checked the tail


def stream_tags() -> tuple[str, ...]:
    """The iterparse ``tag`` filter for ``read_preamble`` + ``stream_scans``."""
    return _STREAM_TAGS


# --- index-guided ---------------------------------------------------------------------------

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


def indexed_scans(
    fd: int,
    index: OffsetIndex,
    pre: Preamble,
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
            scan, needs_arrays = scan_from_element(
                parse(header), index=i, groups=pre.groups, want_arrays=want_arrays
            )
        elif want_arrays and scan.ms_level == 1:
            needs_arrays = True
        if needs_arrays:  # ms level came from a param group or late in the header: MS1 after all
            data = _whole_element(os.pread(fd, end - start, start), i)
            scan = _ms1_with_arrays(data, i, pre, parse)
        yield scan


def _ms1_with_arrays(data: bytes, i: int, pre: Preamble, parse: Any) -> Scan:
    cut = data.find(b"<binaryDataArrayList")
    scan = fast_header(data[:cut], i) if cut >= 0 else None
    if scan is None:
        scan, _ = scan_from_element(parse(data), index=i, groups=pre.groups, want_arrays=True)
        return scan
    close = data.rfind(b"</binaryDataArrayList>")
    if close < cut:
        raise SpectrumError(f"spectrum {i}: <binaryDataArrayList> is not closed")
    arrays = parse(data[cut : close + len(b"</binaryDataArrayList>")])
    length_match = _LENGTH_RE.search(data, 0, data.find(b">") + 1)
    length = int(length_match.group(1)) if length_match else 0
    where = f"spectrum {i} ({_spectrum_id(data)})"
    _decode_arrays(arrays, scan, pre.groups, where, length)
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
_UNIT_NEEDED = frozenset({SCAN_START_TIME, INJECTION_TIME})


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
        level_text = values.get(MS_LEVEL, (b"", b""))[0]
        ms_level = int(level_text) if level_text else (1 if MS1_SPECTRUM in values else None)
        scan = Scan(
            index=index,
            ms_level=ms_level,
            rt_s=None,
            tic=_num(values, TIC),
            base_peak_mz=_num(values, BASE_PEAK_MZ),
            base_peak_intensity=_num(values, BASE_PEAK_INTENSITY),
            is_profile=True if PROFILE in values else False if CENTROID in values else None,
            polarity=1 if POSITIVE in values else -1 if NEGATIVE in values else None,
            injection_time_ms=None,
            precursor_mz=_num(values, SELECTED_ION_MZ),
        )
        if SCAN_START_TIME in values:
            value_s = _num(values, SCAN_START_TIME)
            factor = _TIME_UNITS_S.get(values[SCAN_START_TIME][1].decode())
            scan.rt_s = None if value_s is None or factor is None else value_s * factor
        if INJECTION_TIME in values:
            value_ms = _num(values, INJECTION_TIME)
            factor = _TIME_UNITS_S.get(values[INJECTION_TIME][1].decode())
            if value_ms is not None:
                scan.injection_time_ms = value_ms if factor is None else value_ms * factor * 1e3
        charge = _num(values, CHARGE_STATE)
        scan.precursor_charge = None if charge is None else int(charge)
        if scan.precursor_mz is None:
            scan.precursor_mz = _num(values, ISOLATION_TARGET_MZ)
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
