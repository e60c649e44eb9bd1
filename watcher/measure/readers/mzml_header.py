"""Spectrum header scalars straight from the bytes of a canonically written mzML header.

Used by the index-guided reader (``mzmlindex``) on the header bytes it has read anyway: most
writers lay cvParams out the same way, so a regular expression reads them without building an
XML tree. Anything off that layout returns None, and the caller parses the XML instead.
"""

from __future__ import annotations

import re

from watcher.measure.readers import mzml
from watcher.measure.scan import Scan

# Header cvParams as mzML writers lay them out (accession, name, value[, unitCvRef,
# unitAccession]). Anything else -- another order, param groups, escapes in a number -- is
# left to the XML parse, which handles every form; this only saves parsing 9 of 10 spectra.
_WANTED = rb"MS:1000(?:511|579|127|128|130|129|285|504|505|016|927|744|041|827)"
# One pass: a wanted accession not followed by name/value (group 2 empty) is not canonical.
# Possessive repeats: nothing after them can match a quote, so no backtracking is kept.
_FAST_RE = re.compile(
    rb'accession="(' + _WANTED + rb')"(?:( name="[^"<>]*+" value=")([^"<>]*+)"'
    rb'(?: unitCvRef="[^"<>]*+" unitAccession="([^"<>]*+)")?+)?+'
)
# The accessions as bytes: the findall groups are looked up without decoding each one.
_B_MS_LEVEL = mzml.MS_LEVEL.encode()
_B_MS1_SPECTRUM = mzml.MS1_SPECTRUM.encode()
_B_TIC = mzml.TIC.encode()
_B_BASE_PEAK_MZ = mzml.BASE_PEAK_MZ.encode()
_B_BASE_PEAK_INTENSITY = mzml.BASE_PEAK_INTENSITY.encode()
_B_PROFILE = mzml.PROFILE.encode()
_B_CENTROID = mzml.CENTROID.encode()
_B_POSITIVE = mzml.POSITIVE.encode()
_B_NEGATIVE = mzml.NEGATIVE.encode()
_B_SCAN_START_TIME = mzml.SCAN_START_TIME.encode()
_B_INJECTION_TIME = mzml.INJECTION_TIME.encode()
_B_SELECTED_ION_MZ = mzml.SELECTED_ION_MZ.encode()
_B_ISOLATION_TARGET_MZ = mzml.ISOLATION_TARGET_MZ.encode()
_B_CHARGE_STATE = mzml.CHARGE_STATE.encode()
_B_TIME_UNITS_S = {unit.encode(): factor for unit, factor in mzml.TIME_UNITS_S.items()}
_ABSENT = (b"", b"")


class _NotPlain(Exception):
    """A wanted cvParam is not in the plain layout: the caller takes the full path."""


def _has_escapes_or_groups(header: bytes, stop: int) -> bool:
    """Entities or param group references: only the XML parse reads those right."""
    return (
        header.find(b"&", 0, stop) >= 0 or header.find(b"referenceableParamGroupRef", 0, stop) >= 0
    )


def _seconds(found: tuple[bytes, bytes] | None) -> float | None:
    """A time cvParam's (value, unit accession) in seconds; None when absent or empty.

    Raises:
        _NotPlain: no unit, or one we do not know (the XML path reads unitName).
        ValueError: the value is not a number.
    """
    if found is None:
        return None
    factor = _B_TIME_UNITS_S.get(found[1])
    if factor is None:
        raise _NotPlain
    return float(found[0]) * factor if found[0] else None


def fast_header(header: bytes, index: int, *, end: int = -1) -> Scan | None:
    """Header scalars straight from the bytes of a canonically written spectrum header.

    Only ``header[:end]`` is read (all of it when ``end`` is negative). Returns None (parse
    the XML instead) whenever the bytes are not in the plain layout, a value does not parse
    or a time has no known unit accession.
    """
    stop = len(header) if end < 0 else end
    if _has_escapes_or_groups(header, stop):
        return None
    values: dict[bytes, tuple[bytes, bytes]] = {}
    # Walked backwards so that, as in the XML path, the first occurrence is the one kept.
    for accession, lead, value, unit in reversed(_FAST_RE.findall(header, 0, stop)):
        if not lead:
            return None
        values[accession] = (value, unit)
    get = values.get
    try:
        level_text = get(_B_MS_LEVEL, _ABSENT)[0]
        ms_level = int(level_text) if level_text else (1 if _B_MS1_SPECTRUM in values else None)
        text = get(_B_TIC, _ABSENT)[0]
        tic = float(text) if text else None
        text = get(_B_BASE_PEAK_MZ, _ABSENT)[0]
        base_peak_mz = float(text) if text else None
        text = get(_B_BASE_PEAK_INTENSITY, _ABSENT)[0]
        base_peak_intensity = float(text) if text else None
        # The selected ion's m/z, else the isolation target (as the XML path).
        text = get(_B_SELECTED_ION_MZ, _ABSENT)[0] or get(_B_ISOLATION_TARGET_MZ, _ABSENT)[0]
        precursor_mz = float(text) if text else None
        text = get(_B_CHARGE_STATE, _ABSENT)[0]
        precursor_charge = int(float(text)) if text else None
        rt_s = _seconds(get(_B_SCAN_START_TIME))
        injection_s = _seconds(get(_B_INJECTION_TIME))
        injection_time_ms = None if injection_s is None else injection_s * 1e3
    except (_NotPlain, ValueError):
        return None  # let the XML path read the unit or name the bad value
    return Scan(
        index=index,
        ms_level=ms_level,
        rt_s=rt_s,
        tic=tic,
        base_peak_mz=base_peak_mz,
        base_peak_intensity=base_peak_intensity,
        is_profile=True if _B_PROFILE in values else False if _B_CENTROID in values else None,
        polarity=1 if _B_POSITIVE in values else -1 if _B_NEGATIVE in values else None,
        injection_time_ms=injection_time_ms,
        precursor_mz=precursor_mz,
        precursor_charge=precursor_charge,
    )


# The rest of a canonical cvParam after its accession: name, value[, unitCvRef, unitAccession].
_PARAM_TAIL_RE = re.compile(
    rb'" name="[^"<>]*+" value="([^"<>]*+)"(?: unitCvRef="[^"<>]*+" unitAccession="([^"<>]*+)")?+'
)
_KEY_SCAN_START_TIME = b'accession="' + _B_SCAN_START_TIME
_KEY_INJECTION_TIME = b'accession="' + _B_INJECTION_TIME
_KEY_SELECTED_ION_MZ = b'accession="' + _B_SELECTED_ION_MZ
_KEY_ISOLATION_TARGET_MZ = b'accession="' + _B_ISOLATION_TARGET_MZ
_KEY_CHARGE_STATE = b'accession="' + _B_CHARGE_STATE


def _first_param(header: bytes, key: bytes, stop: int) -> tuple[bytes, bytes] | None:
    """Value and unit accession of the first cvParam ``key`` opens, None if there is none."""
    at = header.find(key, 0, stop)
    if at < 0:
        return None
    tail = _PARAM_TAIL_RE.match(header, at + len(key), stop)
    if tail is None:
        raise _NotPlain
    return tail.group(1), tail.group(2) or b""


def light_header(header: bytes, index: int, ms_level: int, *, end: int = -1) -> Scan | None:
    """The ``NON_MS1_FIELDS`` of a spectrum of ``ms_level`` (not 1), one search per field.

    Each field is the first occurrence of its accession, exactly as ``fast_header`` takes it,
    and None is returned in the same cases (escapes, param groups, a param off the plain
    layout, an unknown time unit, a value that does not parse). The other header fields (TIC,
    base peak, polarity, spectrum type) stay None: no metric reads them for MS2.
    """
    stop = len(header) if end < 0 else end
    if _has_escapes_or_groups(header, stop):
        return None
    try:
        precursor_mz = precursor_charge = None
        rt_s = _seconds(_first_param(header, _KEY_SCAN_START_TIME, stop))
        injection_s = _seconds(_first_param(header, _KEY_INJECTION_TIME, stop))
        injection_time_ms = None if injection_s is None else injection_s * 1e3
        # The selected ion's m/z, else the isolation target (as the XML path).
        found = _first_param(header, _KEY_SELECTED_ION_MZ, stop)
        if found is None or not found[0]:
            found = _first_param(header, _KEY_ISOLATION_TARGET_MZ, stop)
        if found is not None and found[0]:
            precursor_mz = float(found[0])
        found = _first_param(header, _KEY_CHARGE_STATE, stop)
        if found is not None and found[0]:
            precursor_charge = int(float(found[0]))
    except (_NotPlain, ValueError):
        return None  # the full path reads it, or names the bad value
    return Scan(
        index=index,
        ms_level=ms_level,
        rt_s=rt_s,
        tic=None,
        base_peak_mz=None,
        base_peak_intensity=None,
        injection_time_ms=injection_time_ms,
        precursor_mz=precursor_mz,
        precursor_charge=precursor_charge,
    )
