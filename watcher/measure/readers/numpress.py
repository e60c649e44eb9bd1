"""MS-Numpress decoding (linear, pic, slof) in numpy: damaged input is an error, never a crash.

The algorithms are those of Teleman et al., "Numerical compression schemes for proteomics mass
spectrometry data", Mol. Cell. Proteomics 13 (2014) 1537-1542, as the format is written by
the reference implementation (MSNumpress.cpp, the PSI-MS CV terms MS:1002312-MS:1002314):

* a *fixed point* header is the 8 bytes of an IEEE-754 double, most significant byte first
  (linear and slof);
* *linear*: the first two values as unsigned 32-bit little-endian integers (value x fixed
  point, rounded), then for each further value the difference between its integer and the
  linear prediction ``2 y[i-1] - y[i-2]``, written as a half-byte integer;
* *pic* (positive integer): every value rounded and written as a half-byte integer;
* *slof* (short logged float): ``round(log(x + 1) x fixed point)`` as unsigned 16-bit
  little-endian integers.

A half-byte integer is a head nibble then value nibbles, least significant first. A head of
0-8 says that many leading zero nibbles are left out (8: the value is 0, no nibble follows); a
head of 9-15 says head - 8 leading 0xF nibbles are left out (a negative 32-bit value). Nibbles
are packed high half first; an odd count ends with a zero low nibble, which is padding.

The reference decoder reads past its buffer on some damaged input (an unbounded value at the
end, an odd slof tail), which aborts the interpreter from inside the C extension; every such case
is a ``NumpressError`` here. Finding where each value starts is the one sequential step (each
head gives the next one's place); the values themselves are assembled and the linear prediction
undone with numpy (two cumulative sums), so a decode costs a few operations a value.
"""

from __future__ import annotations

import struct
from array import array

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]

# Nibbles a half-byte integer takes, head included, by its head nibble.
_STEP = bytes([9 - h if h <= 8 else 17 - h for h in range(16)])
_BLOCK_VALUES = 1 << 16  # values assembled at once: bounds the (n, 8) nibble matrix


class NumpressError(ValueError):
    """The bytes are not a valid MS-Numpress array of the codec; one line, no paths."""


def decode_linear(raw: bytes, *, max_values: int | None = None) -> FloatArray:
    """Decode MS-Numpress linear prediction (MS:1002312) bytes to float64.

    Args:
        raw: the array's bytes after base64 (and zlib, for MS:1002746).
        max_values: stop with an error once more values than this are found (the declared
            length): a damaged array is refused before it is assembled.

    Raises:
        NumpressError: too few header bytes, a fixed point that is not a positive number,
            a value cut off by the end of the data, or more values than ``max_values``.
    """
    size = len(raw)
    if size == 8:
        return np.zeros(0, dtype=np.float64)  # no values: the encoder writes fixed point 0
    if size < 8:
        raise NumpressError(f"linear: {size} bytes, fewer than the 8 of the fixed point")
    fixed = _fixed_point(raw, "linear")
    if size < 12:
        raise NumpressError(f"linear: {size} bytes, the first value is cut off")
    first = int.from_bytes(raw[8:12], "little")
    if size == 12:
        _check_count(1, max_values, "linear")
        with np.errstate(all="ignore"):
            return _finite(np.array([first / fixed], dtype=np.float64), "linear")
    if size < 16:
        raise NumpressError(f"linear: {size} bytes, the second value is cut off")
    second = int.from_bytes(raw[12:16], "little")
    limit = None if max_values is None else max(max_values - 2, 0)
    diffs = _half_byte_ints(raw[16:], "linear", limit).astype(np.int32).astype(np.int64)
    _check_count(diffs.size + 2, max_values, "linear")
    # y[i] = 2 y[i-1] - y[i-2] + d[i]: the steps e[i] = y[i] - y[i-1] are e[1] + cumsum(d), and
    # y is y[1] + cumsum(e). int64 as in the reference (its integers are 64-bit).
    ints = np.empty(diffs.size + 2, dtype=np.int64)
    ints[0], ints[1] = first, second
    if diffs.size:
        steps = np.cumsum(diffs) + (second - first)
        ints[2:] = np.cumsum(steps) + second
    with np.errstate(all="ignore"):
        return _finite(ints / fixed, "linear")


def decode_pic(raw: bytes, *, max_values: int | None = None) -> FloatArray:
    """Decode MS-Numpress positive integer (MS:1002313) bytes to float64.

    Raises:
        NumpressError: a value cut off by the end of the data, or more than ``max_values``.
    """
    values = _half_byte_ints(raw, "pic", max_values)
    return values.astype(np.float64)


def decode_slof(raw: bytes, *, max_values: int | None = None) -> FloatArray:
    """Decode MS-Numpress short logged float (MS:1002314) bytes to float64.

    Raises:
        NumpressError: fewer than 8 header bytes, a bad fixed point, an odd number of value
            bytes, or more than ``max_values`` values.
    """
    size = len(raw)
    if size < 8:
        raise NumpressError(f"slof: {size} bytes, fewer than the 8 of the fixed point")
    if size == 8:
        return np.zeros(0, dtype=np.float64)
    fixed = _fixed_point(raw, "slof")
    if (size - 8) % 2:
        raise NumpressError(f"slof: {size - 8} value bytes is not a whole number of 2-byte values")
    _check_count((size - 8) // 2, max_values, "slof")
    shorts = np.frombuffer(raw, dtype="<u2", offset=8)
    with np.errstate(all="ignore"):
        return _finite(np.exp(shorts / fixed) - 1.0, "slof")


def _finite(values: FloatArray, codec: str) -> FloatArray:
    """The values, unless a damaged fixed point made some of them infinite."""
    out = np.asarray(values, dtype=np.float64)
    if not np.isfinite(out).all():
        raise NumpressError(f"{codec}: the fixed point makes values overflow (damaged header)")
    return out


def _fixed_point(raw: bytes, codec: str) -> float:
    (fixed,) = struct.unpack(">d", raw[:8])
    # +inf is what the reference encoder writes for an all-zero array (every value decodes to 0).
    if not fixed > 0:  # also NaN
        raise NumpressError(f"{codec}: fixed point {fixed!r} is not a positive number")
    return float(fixed)


def _check_count(count: int, max_values: int | None, codec: str) -> None:
    if max_values is not None and count > max_values:
        raise NumpressError(f"{codec}: more than the {max_values} values declared")


def _half_byte_ints(raw: bytes, codec: str, max_values: int | None) -> npt.NDArray[np.uint32]:
    """The half-byte integers packed in ``raw``, as unsigned 32-bit values."""
    packed = np.frombuffer(raw, dtype=np.uint8)
    nibbles = np.empty(2 * packed.size + 8, dtype=np.uint8)  # 8 zero nibbles of padding
    nibbles[0 : 2 * packed.size : 2] = packed >> 4
    nibbles[1 : 2 * packed.size : 2] = packed & 0x0F
    nibbles[2 * packed.size :] = 0
    total = 2 * packed.size
    starts = _value_starts(nibbles[:total].tobytes(), codec, max_values)
    out = np.empty(len(starts), dtype=np.uint32)
    where = np.frombuffer(starts, dtype=np.int64) if len(starts) else np.zeros(0, np.int64)
    for at in range(0, where.size, _BLOCK_VALUES):
        out[at : at + _BLOCK_VALUES] = _assemble(nibbles, where[at : at + _BLOCK_VALUES])
    return out


def _value_starts(nibbles: bytes, codec: str, max_values: int | None) -> array[int]:
    """Where each half-byte integer's head nibble is (the one sequential step of a decode)."""
    starts: array[int] = array("q")
    total = len(nibbles)
    position = 0
    step = _STEP
    limit = max_values if max_values is not None else total
    while position < total:
        head = nibbles[position]
        if head == 0 and position == total - 1:
            break  # the zero low nibble that pads an odd count
        starts.append(position)
        position += step[head]
        if len(starts) > limit:
            raise NumpressError(f"{codec}: more than the {limit} values declared")
    if position > total:
        raise NumpressError(f"{codec}: the last value is cut off by the end of the data")
    return starts


def _assemble(
    nibbles: npt.NDArray[np.uint8], starts: npt.NDArray[np.int64]
) -> npt.NDArray[np.uint32]:
    heads = nibbles[starts].astype(np.int64)
    left_out = np.where(heads <= 8, heads, heads - 8)  # leading nibbles not written
    written = 8 - left_out
    columns = np.arange(8, dtype=np.int64)
    digits = nibbles[starts[:, None] + 1 + columns].astype(np.uint64)  # padding keeps it in range
    digits[columns[None, :] >= written[:, None]] = 0
    values = (digits << (np.uint64(4) * columns.astype(np.uint64))).sum(axis=1, dtype=np.uint64)
    ones = heads > 8
    if ones.any():
        low_mask = (np.uint64(1) << (np.uint64(4) * written[ones].astype(np.uint64))) - np.uint64(1)
        values[ones] |= np.uint64(0xFFFFFFFF) & ~low_mask
    out: npt.NDArray[np.uint32] = values.astype(np.uint32)
    return out
