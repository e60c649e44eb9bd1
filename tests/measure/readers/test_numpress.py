"""Our numpy MS-Numpress decoders against the reference codec (pynumpress, the registry's binding
of MSNumpress.cpp by Teleman et al., MCP 2014), and fuzzed: damaged input is an error, never a
crash or a hang.

Every decoder of arrays.py is fuzzed in this process: a decoder that aborted the interpreter
(as the C decoder does on some damaged arrays) would fail the whole test run, not one test.
"""

from __future__ import annotations

import base64
import zlib

import numpy as np
import pynumpress
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from lxml import etree

from tests.helpers.badfiles import REFERENCE, tsv_rows
from watcher.measure.readers import numpress
from watcher.measure.readers.arrays import KNOWN_COMPRESSIONS, ArrayDecodeError, decode_array

_RNG = np.random.default_rng(20261203)


def _reference(codec: str, values: np.ndarray) -> tuple[bytes, np.ndarray]:
    """(encoded bytes, the reference decoder's values) for ``values``."""
    if codec == "linear":
        encoded = pynumpress.encode_linear(values, pynumpress.optimal_linear_fixed_point(values))
    elif codec == "slof":
        encoded = pynumpress.encode_slof(values, pynumpress.optimal_slof_fixed_point(values))
    else:
        encoded = pynumpress.encode_pic(values)
    raw = np.asarray(encoded, dtype=np.uint8).tobytes()
    decoder = getattr(pynumpress, f"decode_{codec}")
    return raw, np.asarray(decoder(np.frombuffer(raw, dtype=np.uint8)), dtype=np.float64)


def _random_arrays() -> list[np.ndarray]:
    arrays = [np.zeros(0), np.zeros(5), np.array([0.0, 1.0]), np.array([1e-3, 2e9])]
    for n in (2, 3, 17, 256, 5000):
        for scale in (1e-2, 1.0, 1e3, 1e6, 1e9):
            values = _RNG.random(n) * scale
            arrays += [values, np.sort(values)]  # sorted: m/z and time arrays
    return arrays


@pytest.mark.parametrize("codec", ["linear", "pic", "slof"])
def test_random_round_trips_match_the_reference_decoder(codec: str) -> None:
    """Encoded by pynumpress, our decode equals pynumpress' decode (linear, pic: exactly)."""
    ours = {"linear": numpress.decode_linear, "pic": numpress.decode_pic}
    for values in _random_arrays():
        raw, expected = _reference(codec, values)
        if codec == "slof":
            got = numpress.decode_slof(raw)
            # exp() of numpy and of the C library may differ in the last bit of exp(x); the
            # "- 1" then leaves that bit as it is, so the bound is an ulp of 1 + value
            # (a relative bound fails near 0, where the subtraction cancels).
            np.testing.assert_array_less(np.abs(got - expected), 2.5 * np.spacing(expected + 1.0))
        else:
            got = ours[codec](raw)
            np.testing.assert_array_equal(got, expected)
        assert got.size == values.size


def test_single_value_linear_array_decodes_to_the_encoded_value() -> None:
    """One value: the reference encoder writes 12 bytes (which its decoder refuses); we decode it.

    Expected: the value itself within the fixed point's resolution (MS-Numpress linear keeps
    about 1e-9 relative for values near the array maximum, Teleman et al. 2014, table 1).
    """
    raw = np.asarray(
        pynumpress.encode_linear(
            np.array([523.2841]), pynumpress.optimal_linear_fixed_point(np.array([523.2841]))
        ),
        dtype=np.uint8,
    ).tobytes()
    assert len(raw) == 12
    np.testing.assert_allclose(numpress.decode_linear(raw), [523.2841], rtol=1e-8)


def _real_arrays() -> list[tuple[str, bytes]]:
    """(codec, raw bytes) of the Numpress arrays of mini_numpress.chrom.mzML (pymzML, MIT)."""
    tree = etree.parse(str(REFERENCE / "mzml" / "mini_numpress.chrom.mzML"))
    ns = {"m": "http://psi.hupo.org/ms/mzml"}
    out = []
    for bda in tree.iterfind(".//m:binaryDataArray", ns):
        accessions = {p.get("accession") for p in bda.iterfind("m:cvParam", ns)}
        codec = (
            "linear"
            if "MS:1002312" in accessions
            else "pic"
            if "MS:1002313" in accessions
            else None
        )
        if codec is not None:
            out.append((codec, base64.b64decode(bda.findtext("m:binary", namespaces=ns) or "")))
    return out


def test_real_numpress_arrays_match_the_reference_decoder() -> None:
    """Both arrays of the one Numpress sample file decode as pynumpress decodes them, and to
    chromatograms.tsv's first/last time and intensity sum."""
    arrays = _real_arrays()
    assert sorted(codec for codec, _raw in arrays) == ["linear", "pic"]  # the file as described
    row = next(r for r in tsv_rows("chromatograms.tsv") if "numpress" in r["file"])
    for codec, raw in arrays:
        ours = getattr(numpress, f"decode_{codec}")(raw)
        reference = getattr(pynumpress, f"decode_{codec}")(np.frombuffer(raw, dtype=np.uint8))
        np.testing.assert_array_equal(ours, reference)
        assert ours.size == int(row["n_points"])
        if codec == "linear":  # the time array
            assert ours[0] == pytest.approx(float(row["first_time"]), rel=1e-12)
            assert ours[-1] == pytest.approx(float(row["last_time"]), rel=1e-12)
        else:
            assert ours.sum() == pytest.approx(float(row["sum_intensity"]), rel=1e-12)


@pytest.mark.parametrize(
    ("decoder", "raw", "says"),
    [
        (numpress.decode_linear, b"\x00" * 5, "fewer than the 8"),
        (numpress.decode_linear, b"\x41\x00\x00\x00\x00\x00\x00\x00\x01\x02", "first value"),
        (numpress.decode_linear, b"\x41" + b"\x00" * 7 + b"\x01" * 6, "second value"),
        (numpress.decode_linear, b"\x41" + b"\x00" * 15 + b"\x0f", "cut off"),
        (numpress.decode_linear, b"\x7f\xf8" + b"\x00" * 14, "positive number"),  # NaN
        (numpress.decode_pic, b"\x01\x23", "cut off"),  # head 0: 8 nibbles must follow
        (numpress.decode_slof, b"\x40\x00\x00\x00\x00\x00\x00\x00\x01", "whole number"),
        (numpress.decode_slof, b"\xc0" + b"\x00" * 9, "positive number"),  # negative fixed point
    ],
)
def test_damaged_bytes_are_one_line_errors(decoder: object, raw: bytes, says: str) -> None:
    """Truncated values, a bad fixed point, an odd slof tail: NumpressError, one line.

    The layouts are those of the format (module docstring; Teleman et al. 2014).
    """
    with pytest.raises(numpress.NumpressError) as caught:
        decoder(raw)  # type: ignore[operator]
    assert says in str(caught.value)
    assert "\n" not in str(caught.value)


def test_more_values_than_declared_stop_the_decode() -> None:
    """A declared length bounds the decode: 1000 zeros (one nibble each) with 10 declared."""
    with pytest.raises(numpress.NumpressError, match="10 values declared"):
        numpress.decode_pic(b"\x88" * 500, max_values=10)


# --- fuzzing every decoder of arrays.py ---------------------------------------------------------

_COMPRESSIONS = sorted(KNOWN_COMPRESSIONS)
_DTYPES = ["<f8", "<f4", "<i4", "<i8", "<f2"]


def _decode_or_error(raw: bytes, compression: str, dtype: str, length: int | None) -> None:
    """Decode; an input either gives values of the declared length or one ArrayDecodeError line."""
    text = base64.b64encode(raw)
    message = None
    try:
        values = decode_array(text, compression=compression, dtype=dtype, expected_length=length)
    except ArrayDecodeError as exc:
        message = str(exc)
    if message is not None:
        assert message
        assert "\n" not in message
        return
    assert values.dtype == np.float64
    if length is not None:
        assert values.size == length


_FUZZ = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@_FUZZ
@given(
    raw=st.binary(max_size=400),
    compression=st.sampled_from(_COMPRESSIONS),
    dtype=st.sampled_from(_DTYPES),
    length=st.one_of(st.none(), st.integers(0, 300)),
)
def test_random_bytes_decode_or_give_one_line(
    raw: bytes, compression: str, dtype: str, length: int | None
) -> None:
    """Random bytes under every compression accession: values or a one-line error."""
    _decode_or_error(raw, compression, dtype, length)


def _encoded(codec: str, values: np.ndarray, zlibbed: bool) -> bytes:
    raw, _reference_values = _reference(codec, values)
    return zlib.compress(raw) if zlibbed else raw


_ACCESSION = {
    ("linear", False): "MS:1002312",
    ("pic", False): "MS:1002313",
    ("slof", False): "MS:1002314",
    ("linear", True): "MS:1002746",
    ("pic", True): "MS:1002747",
    ("slof", True): "MS:1002748",
}


@_FUZZ
@given(
    codec=st.sampled_from(["linear", "pic", "slof"]),
    zlibbed=st.booleans(),
    n=st.integers(2, 200),
    data=st.data(),
)
def test_bit_flips_and_truncations_of_real_arrays(
    codec: str, zlibbed: bool, n: int, data: st.DataObject
) -> None:
    """A valid array with bits flipped or its end cut off: values or a one-line error."""
    values = np.sort(np.random.default_rng(n).random(n) * 2000.0)  # seeded: hypothesis replays
    raw = bytearray(_encoded(codec, values, zlibbed))
    for _flip in range(data.draw(st.integers(0, 4))):
        at = data.draw(st.integers(0, len(raw) - 1))
        raw[at] ^= 1 << data.draw(st.integers(0, 7))
    cut = data.draw(st.integers(0, len(raw)))
    declared = data.draw(st.sampled_from([None, n]))
    _decode_or_error(bytes(raw[:cut]), _ACCESSION[(codec, zlibbed)], "<f8", declared)


@_FUZZ
@given(raw=st.binary(max_size=200), cut=st.integers(0, 200), flip=st.integers(0, 1599))
def test_zlib_and_plain_arrays_flipped_or_cut(raw: bytes, cut: int, flip: int) -> None:
    """zlib and uncompressed arrays, damaged: values or a one-line error."""
    packed = bytearray(zlib.compress(raw))
    if packed:
        packed[(flip // 8) % len(packed)] ^= 1 << (flip % 8)
    _decode_or_error(bytes(packed[:cut]), "MS:1000574", "<f4", len(raw) // 4)
    _decode_or_error(raw[:cut], "MS:1000576", "<f8", None)


_REAL = _real_arrays()


@_FUZZ
@given(which=st.integers(0, len(_REAL) - 1), data=st.data())
def test_the_real_file_arrays_flipped_or_cut(which: int, data: st.DataObject) -> None:
    """mini_numpress.chrom.mzML's own arrays, damaged: values or a one-line error."""
    codec, original = _REAL[which]
    raw = bytearray(original)
    for _flip in range(data.draw(st.integers(0, 3))):
        at = data.draw(st.integers(0, len(raw) - 1))
        raw[at] ^= 1 << data.draw(st.integers(0, 7))
    cut = data.draw(st.integers(0, len(raw)))
    declared = data.draw(st.sampled_from([None, 176]))  # chromatograms.tsv: 176 points
    _decode_or_error(bytes(raw[:cut]), _ACCESSION[(codec, False)], "<f8", declared)
