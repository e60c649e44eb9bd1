"""mzML spectra to Scan records: cvParams by accession, MS1 arrays decoded on request.

Two ways through a file, one element decoder (``scan_from_element``):

* index-guided (indexedmzML, ``watcher.measure.readers.mzml_index``): the embedded offset
  index gives each spectrum's byte offset; only headers and MS1 spectra are read
  (docs/performance.md, method h);
* streaming (plain mzML, mzML.gz, or any doubt about the index): lxml iterparse, one spectrum
  element at a time, cleared behind us so memory stays flat.

Never pyteomics' byte indexer, which is quadratic on crafted input (docs/reliability.md, item 1).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from watcher.measure.readers import cv
from watcher.measure.readers.arrays import (
    DTYPES,
    KNOWN_COMPRESSIONS,
    ArrayDecodeError,
    decode_array,
)
from watcher.measure.scan import Scan

if TYPE_CHECKING:
    from collections.abc import Iterable, Iterator

# Accessions (tests/data/mzml-cv-terms.tsv).
MS_LEVEL = "MS:1000511"
MS1_SPECTRUM = "MS:1000579"
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
TIME_UNITS_S = {"UO:0000010": 1.0, "UO:0000031": 60.0, "UO:0000028": 1e-3, "UO:0000032": 3600.0}
_TIME_UNIT_NAMES_S = {"second": 1.0, "minute": 60.0, "millisecond": 1e-3, "hour": 3600.0}

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
    return _Params(param_values(element, groups))


def param_values(element: Any, groups: Groups) -> dict[str, Param]:
    """An element's cvParams by accession, its referenced param groups' included (the first
    value of an accession wins); the spectrum and the chromatogram readers share it."""
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
    return values


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
        declared = _declared_length(element) > 0
        # Values declared but no arrays at all: an empty spectrum, unless ``element`` is a
        # header fragment (the caller then reads the whole element and asks again).
        scan.arrays_damaged = declared
        return scan, declared
    decode_arrays(arrays_element, scan, groups, where, _declared_length(element))
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
            # A negative time is a writer's "unknown" (-1 is the usual sentinel), not a time.
            scan.rt_s = None if factor is None or value is None or value < 0 else value * factor
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
        return TIME_UNITS_S.get(unit_acc)
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
                        selected_mz = params.number(SELECTED_ION_MZ, where)
                        if selected_mz is not None:  # else keep the isolation target m/z
                            scan.precursor_mz = selected_mz
                        charge = params.number(CHARGE_STATE, where)
                        scan.precursor_charge = None if charge is None else int(charge)
                        break
            elif name == "isolationWindow" and scan.precursor_mz is None:
                scan.precursor_mz = _params_of(part, groups).number(ISOLATION_TARGET_MZ, where)
        return  # the first precursor is the one selected


def decode_arrays(
    array_list: Any, scan: Scan, groups: Groups, where: str, default_length: int
) -> None:
    """Decode the m/z and intensity arrays of a ``<binaryDataArrayList>`` element into ``scan``."""
    _decode_parts(_element_parts(array_list, groups, default_length), scan, where, default_length)


ArrayPart = tuple[tuple[str, ...], int | None, bytes]  # accessions, arrayLength, base64 text


def decode_plain_arrays(
    parts: Iterable[ArrayPart], scan: Scan, where: str, default_length: int
) -> None:
    """Like ``decode_arrays``, from arrays already cut out of the bytes (cvParam accessions only).

    The caller guarantees the arrays carry nothing but cvParams (no param group references).
    """
    items = (
        (_Params({acc: (acc, "", None, None) for acc in accessions}),  # first one wins
        text,
        default_length if length is None else length)
        for accessions, length, text in parts
    )  # fmt: skip
    _decode_parts(items, scan, where, default_length)


def _element_parts(
    array_list: Any, groups: Groups, default_length: int
) -> Iterator[tuple[_Params, str | bytes | None, int]]:
    for bda in array_list:
        if local_name(bda.tag) != "binaryDataArray":
            continue
        binary = next((c for c in bda if local_name(c.tag) == "binary"), None)
        length_text = bda.get("arrayLength")
        expected = int(length_text) if length_text and length_text.isdigit() else default_length
        yield _params_of(bda, groups), None if binary is None else binary.text, expected


def _decode_parts(
    parts: Iterable[tuple[_Params, str | bytes | None, int]],
    scan: Scan,
    where: str,
    default_length: int,
) -> None:
    arrays: dict[str, np.ndarray] = {}
    for params, text, expected in parts:
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
        try:
            arrays[kind] = decode_array(
                text, compression=compression, dtype=dtype, expected_length=expected
            )
        except ArrayDecodeError as exc:
            if not _shorter_than_declared(exc):
                raise SpectrumError(f"{where}: {_kind_name(kind)}: {exc}") from None
            # A writer that declared more values than it wrote (an empty <binary/> under a
            # non-zero defaultArrayLength): the text decoded cleanly, so the file is sound and
            # only this spectrum is empty. More values than declared stays an error: that is
            # also how an inflate past the declared size (a zip bomb) shows.
            scan.arrays_damaged = True
    mz = arrays.get(MZ_ARRAY)
    intensity = arrays.get(INTENSITY_ARRAY)
    if scan.arrays_damaged or mz is None or intensity is None:
        # A spectrum without an m/z or intensity array has no peaks to read: empty, counted.
        scan.arrays_damaged = scan.arrays_damaged or default_length > 0
        mz = intensity = np.zeros(0, dtype=np.float64)
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


_SHORT_RE = re.compile(r"array holds (\d+) values, (\d+) declared")


def _shorter_than_declared(exc: ArrayDecodeError) -> bool:
    """Whether ``decode_array`` refused an array only for holding fewer values than declared."""
    found = _SHORT_RE.fullmatch(str(exc))
    return found is not None and int(found.group(1)) < int(found.group(2))


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
    "{*}chromatogram",
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
        elif name in ("spectrumList", "chromatogramList", "chromatogram", "run"):
            # The spectra are done; the chromatograms, if wanted, are read from the same events
            # (watcher.measure.readers.mzml_chrom); completeness checked the tail.
            return


def stream_tags() -> tuple[str, ...]:
    """The iterparse ``tag`` filter for ``read_preamble`` + ``stream_scans``."""
    return _STREAM_TAGS
