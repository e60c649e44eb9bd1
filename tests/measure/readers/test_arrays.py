"""Array decoding: the SIMD decoders accept and refuse exactly what the standard library does.

Reference: Python's own ``base64`` (RFC 4648, ``validate=True``) and ``zlib`` (RFC 1950, the
zlib format mzML's MS:1000574 names) encode the payloads and decide what is valid.
"""

from __future__ import annotations

import base64
import binascii
import zlib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from watcher.measure.readers.arrays import NO_COMPRESSION, ZLIB, ArrayDecodeError, decode_array


def _encode(values: np.ndarray, *, compress: bool) -> bytes:
    raw = values.tobytes()
    return base64.b64encode(zlib.compress(raw) if compress else raw)


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.floats(allow_nan=False, width=32), max_size=400),  # fits either dtype
    st.booleans(),
    st.sampled_from(["<f8", "<f4"]),
)
def test_round_trip_equals_the_standard_library(
    values: list[float], compress: bool, dtype: str
) -> None:
    array = np.asarray(values, dtype=np.float64).astype(dtype)
    text = _encode(array, compress=compress)
    decoded = decode_array(
        text, compression=ZLIB if compress else NO_COMPRESSION, dtype=dtype,
        expected_length=array.size,
    )  # fmt: skip
    assert np.array_equal(decoded, array.astype(np.float64))


def test_large_array_decodes_bit_for_bit() -> None:
    rng = np.random.default_rng(7)
    mz = np.sort(rng.uniform(100.0, 1500.0, 200_000))
    text = _encode(mz, compress=True)
    out = decode_array(text, compression=ZLIB, dtype="<f8", expected_length=mz.size)
    assert out.tobytes() == mz.tobytes()


def test_wrapped_and_padded_text_as_the_standard_library_reads_it() -> None:
    values = np.arange(10, dtype="<f8")
    text = _encode(values, compress=False)
    wrapped = b"\n".join(text[i : i + 76] for i in range(0, len(text), 76))  # RFC 2045 lines
    assert np.array_equal(
        decode_array(wrapped, compression=NO_COMPRESSION, dtype="<f8", expected_length=10), values
    )
    # Excess padding: CPython's strict decoder accepts it (pybase64 alone would not).
    whole = base64.b64encode(b"\x00" * 24)  # 32 characters, no padding needed
    assert base64.b64decode(whole + b"====", validate=True) == b"\x00" * 24
    out = decode_array(whole + b"====", compression=NO_COMPRESSION, dtype="<f8", expected_length=3)
    assert out.tolist() == [0.0, 0.0, 0.0]


@pytest.mark.parametrize("bad", [b"AAA*AAAA", b"AAAAA", b"AAAA\x00AAA"])
def test_text_the_standard_library_refuses_is_refused(bad: bytes) -> None:
    with pytest.raises(binascii.Error):
        base64.b64decode(bad, validate=True)
    with pytest.raises(ArrayDecodeError, match="invalid base64"):
        decode_array(bad, compression=NO_COMPRESSION, dtype="<f8", expected_length=None)


def test_damaged_zlib_is_refused_as_zlib_refuses_it() -> None:
    stream = zlib.compress(np.arange(500, dtype="<f8").tobytes())
    damaged = {
        "truncated": stream[:-10],
        "checksum": stream[:-4] + bytes(4),  # adler-32 of RFC 1950 wrong
        "header": b"\x00\x00" + stream[2:],
        "body": stream[:40] + bytes(b ^ 0xFF for b in stream[40:60]) + stream[60:],
    }
    for name, data in damaged.items():
        with pytest.raises(zlib.error):
            zlib.decompress(data)
        with pytest.raises(ArrayDecodeError, match="corrupt zlib"):
            decode_array(base64.b64encode(data), compression=ZLIB, dtype="<f8", expected_length=500)
        assert name  # each case named for the failure report
