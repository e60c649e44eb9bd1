"""mzML binary data arrays decoded by their CV accessions: none, zlib and MS-Numpress (+zlib).

MS-Numpress is decoded by ``watcher.measure.readers.numpress`` (numpy, bounds-checked), not by
a C extension, so a damaged array is an error naming its spectrum and never kills the process.

The codec is chosen by accession, never by the cvParam's name: files exist whose names and
accessions disagree, and a codec picked by name returns plausible-looking garbage
(tests/data/README.md, pitfall 1). A compression this module cannot decode is an error,
never "no compression".

Decoding is the bulk of a QC pass over MS1 (bench/, DEVELOPERS.md "Benchmarks"), so the two
steps use SIMD implementations: pybase64 (strict alphabet, as the standard library's
``validate=True``) and ISA-L's zlib-compatible inflate (same format, adler-32 checked). Any text
pybase64 refuses goes to the standard library's decoder, so what is accepted, and every error
message, stay as before.
"""

from __future__ import annotations

import base64
import binascii
import zlib
from typing import TYPE_CHECKING, cast

import numpy as np
import pybase64
from isal import isal_zlib

from watcher.measure.readers import numpress

if TYPE_CHECKING:
    from collections.abc import Callable

    from watcher.measure.scan import FloatArray

NO_COMPRESSION = "MS:1000576"
ZLIB = "MS:1000574"
_NUMPRESS: dict[str, tuple[str, bool]] = {
    # accession: (codec, zlib applied after numpress)
    "MS:1002312": ("linear", False),
    "MS:1002313": ("pic", False),
    "MS:1002314": ("slof", False),
    "MS:1002746": ("linear", True),
    "MS:1002747": ("pic", True),
    "MS:1002748": ("slof", True),
}
# Our own numpy decoders, not a C extension: damaged input must be an error, never an abort of
# the interpreter (watcher.measure.readers.numpress).
_DECODERS: dict[str, Callable[..., FloatArray]] = {
    "linear": numpress.decode_linear,
    "pic": numpress.decode_pic,
    "slof": numpress.decode_slof,
}
# Binary data type accessions (MS:1000518 children) -> little-endian numpy dtype.
DTYPES: dict[str, str] = {
    "MS:1000523": "<f8",  # 64-bit float
    "MS:1000521": "<f4",  # 32-bit float
    "MS:1000519": "<i4",  # 32-bit integer
    "MS:1000522": "<i8",  # 64-bit integer
    "MS:1000520": "<f2",  # 16-bit float
}
# isal's stub types ``error`` as an instance; at run time it is the exception class.
_INFLATE_ERRORS: tuple[type[Exception], ...] = (
    zlib.error,
    cast("type[Exception]", isal_zlib.error),
)
KNOWN_COMPRESSIONS = frozenset({NO_COMPRESSION, ZLIB, *_NUMPRESS})


class ArrayDecodeError(ValueError):
    """The array's bytes do not decode; the message is one line, without paths."""


def decode_array(
    text: str | bytes | None, *, compression: str, dtype: str, expected_length: int | None
) -> FloatArray:
    """Decode one base64 ``<binary>`` payload into float64 values.

    Args:
        text: the element's text (None or empty for an empty array).
        compression: the compression accession (``KNOWN_COMPRESSIONS``).
        dtype: numpy dtype string of the uncompressed values (ignored for Numpress, whose
            output is always float64).
        expected_length: the declared number of values; a mismatch is an error, so that a
            damaged array is never measured.

    Raises:
        ArrayDecodeError: bad base64, corrupt zlib, a byte count that is not a whole number of
            values, or a length other than declared.
        KeyError: ``compression`` is not one this module decodes (the caller names the term).
    """
    if compression not in KNOWN_COMPRESSIONS:
        raise KeyError(compression)
    raw = _b64(text)
    if (compression == ZLIB or _NUMPRESS.get(compression, ("", False))[1]) and raw:
        raw = _inflate(raw, _max_bytes(compression, dtype, expected_length))
    if compression in _NUMPRESS:
        values = _numpress(raw, _NUMPRESS[compression][0], expected_length)
    else:
        width = np.dtype(dtype).itemsize
        if len(raw) % width:
            raise ArrayDecodeError(
                f"array of {len(raw)} bytes is not a whole number of {width}-byte values"
            )
        values = np.frombuffer(raw, dtype=dtype).astype(np.float64)
    if expected_length is not None and values.size != expected_length:
        raise ArrayDecodeError(f"array holds {values.size} values, {expected_length} declared")
    return values


def _max_bytes(compression: str, dtype: str, expected_length: int | None) -> int | None:
    """The most bytes an array of the declared length can inflate to; None when unknown."""
    if expected_length is None:
        return None
    if compression in _NUMPRESS:
        # MS-Numpress writes at most 4.5 bytes a value (linear, pic; slof 2) after an 8-byte
        # header: 5 per value plus 16 bounds every codec.
        return 5 * expected_length + 16
    return np.dtype(dtype).itemsize * expected_length


def _inflate(raw: bytes, max_bytes: int | None) -> bytes:
    """zlib-inflate ``raw``, never past ``max_bytes``: a zlib bomb is refused, not allocated.

    A 1 MB array can inflate to 1 GB; with the declared length known, one byte past what it
    allows is proof enough that the array is not what its header says.
    """
    try:
        if max_bytes is None:
            return isal_zlib.decompress(raw)
        inflater = isal_zlib.decompressobj()
        out = inflater.decompress(raw, max_bytes + 1)
    except _INFLATE_ERRORS as exc:
        raise ArrayDecodeError(f"corrupt zlib data ({exc})") from None
    if len(out) > max_bytes:
        raise ArrayDecodeError(f"zlib data inflates past the {max_bytes} bytes declared")
    if not inflater.eof:
        raise ArrayDecodeError("corrupt zlib data (incomplete or truncated stream)")
    return out


def _b64(text: str | bytes | None) -> bytes:
    if not text:
        return b""
    data = text.encode("ascii", "replace") if isinstance(text, str) else text
    try:
        # Most writers put no whitespace in <binary>: decode the text as it is, no copy.
        return pybase64.b64decode(data, validate=True)
    except (binascii.Error, ValueError):
        pass
    try:
        return base64.b64decode(data, validate=True)  # the standard library's padding rules
    except binascii.Error:
        pass
    stripped = b"".join(data.split())  # wrapped text (RFC 2045 lines) is valid mzML
    try:
        return base64.b64decode(stripped, validate=True)
    except binascii.Error as exc:
        raise ArrayDecodeError(f"invalid base64 ({exc})") from None


def _numpress(raw: bytes, codec: str, expected_length: int | None) -> FloatArray:
    if not raw:
        return np.zeros(0, dtype=np.float64)
    try:
        return _DECODERS[codec](raw, max_values=expected_length)
    except numpress.NumpressError as exc:
        raise ArrayDecodeError(f"corrupt MS-Numpress {codec} data ({exc})") from None
