"""Readers against the reference files: counts, RT ranges, header values and arrays as declared.

Expected values come from tests/data/files.tsv and spectra.tsv (measured there with
pyteomics 5.0.1 and an independent accession-keyed decode; origins of the files in
reference/README.md: HUPO-PSI mzML examples, pymzML and pyteomics test files).
"""

from __future__ import annotations

import base64
import math
import time
import urllib.request
from collections import Counter
from typing import TYPE_CHECKING, Any

import numpy as np
import pynumpress
import pytest
from lxml import etree

from tests.helpers import badfiles as bf
from tests.helpers.badfiles import EXAMPLE, REFERENCE, TINY, gz, tsv_rows, write
from watcher.errors import ReadError
from watcher.measure.readers import cv, mzml
from watcher.measure.readers.arrays import decode_array
from watcher.measure.readers.read import open_run

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.measure.scan import Scan

FILES = [r for r in tsv_rows("files.tsv") if r["format"].split()[0] in ("mzML", "mzXML", "MGF")]
SPECTRA = tsv_rows("spectra.tsv")


def _read(path: Path, **kwargs: Any) -> list[Scan]:
    with open_run(path, **kwargs) as (_header, scans):
        return list(scans)


def _close(actual: float | None, expected: str, rel: float) -> bool:
    return actual is not None and math.isclose(actual, float(expected), rel_tol=rel, abs_tol=1e-12)


@pytest.mark.parametrize("row", FILES, ids=[r["local_path"] for r in FILES])
def test_reference_file_counts_and_rt_range(row: dict[str, str]) -> None:
    """Each reference run opens; spectrum count, MS levels and RT range match files.tsv."""
    scans = _read(REFERENCE / row["local_path"])
    assert len(scans) == int(row["n_spectra"])  # files.tsv n_spectra
    levels = Counter(f"MS{s.ms_level}" for s in scans)
    declared = dict(
        part.split(" ")[0].split("=") for part in row["ms_levels"].split(";") if "=" in part
    )
    assert {k: str(v) for k, v in levels.items()} == declared  # files.tsv ms_levels
    rts = [s.rt_s for s in scans if s.rt_s is not None]
    if row["rt_min_s"]:
        assert math.isclose(min(rts), float(row["rt_min_s"]), rel_tol=1e-9)  # files.tsv rt_min_s
        assert math.isclose(max(rts), float(row["rt_max_s"]), rel_tol=1e-9)  # files.tsv rt_max_s
    else:
        assert rts == []


def _spectra_of(local_path: str) -> list[dict[str, str]]:
    return [r for r in SPECTRA if r["file"] == local_path]


@pytest.mark.parametrize("local_path", sorted({r["file"] for r in SPECTRA}), ids=lambda p: str(p))
def test_per_spectrum_values_match_spectra_tsv(local_path: str) -> None:
    """Header values, RT in seconds, precursor and MS1 array sums match spectra.tsv per spectrum."""
    _check_against(_read(REFERENCE / local_path), _spectra_of(local_path))


def test_byte_level_header_path_matches_spectra_tsv(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """tiny.pwiz with its param groups written inline is read without any XML header parse."""
    data = bf.reindexed(bf.inline_param_groups(TINY.read_bytes()))
    path = write(tmp_path, "QC_inline.mzML", data)

    def no_xml_header(*_args: Any, **_kwargs: Any) -> Any:
        raise AssertionError("XML header parse used")

    monkeypatch.setattr(mzml, "scan_from_element", no_xml_header)
    monkeypatch.setattr(mzml, "stream_scans", no_xml_header)
    _check_against(_read(path), _spectra_of("mzml/tiny.pwiz.1.1.mzML"))


def test_non_canonical_attribute_order_falls_back_to_xml(tmp_path: Path) -> None:
    """adv_mzqc (unitAccession before unitCvRef) indexed gives the same scans as streamed."""
    indexed = write(tmp_path, "QC_adv.mzML", bf.as_indexed(bf.PLAIN.read_bytes()))
    streamed, through_index = _read(bf.PLAIN), _read(indexed)
    assert [_fields(s) for s in through_index] == [_fields(s) for s in streamed]
    for a, b in zip(through_index, streamed, strict=True):
        assert a.intensity is not None
        assert b.intensity is not None
        assert np.array_equal(a.intensity, b.intensity)
    _check_against(through_index, _spectra_of("mzml/adv_mzqc_in_mzml.mzML"))


def _check_against(scans: list[Scan], rows: list[dict[str, str]]) -> None:
    assert len(scans) == len(rows)
    for scan, row in zip(scans, rows, strict=True):
        assert scan.ms_level == int(row["ms_level"])  # spectra.tsv ms_level
        if row["rt_seconds"]:
            assert _close(scan.rt_s, row["rt_seconds"], 1e-9)  # spectra.tsv rt_seconds
        else:
            assert scan.rt_s is None
        # Past MS1 a reader may leave these None (scan.NON_MS1_FIELDS); if filled, they match.
        full = scan.ms_level == 1
        if row["polarity"] and (full or scan.polarity is not None):
            assert scan.polarity == (1 if row["polarity"] == "+" else -1)  # spectra.tsv polarity
        if row["representation"] in ("centroid", "profile") and (
            full or scan.is_profile is not None
        ):
            assert scan.is_profile is (row["representation"] == "profile")
        if row["header_tic"] and (full or scan.tic is not None):
            assert _close(scan.tic, row["header_tic"], 1e-9)  # spectra.tsv header_tic
        if row["header_base_peak_intensity"] and (full or scan.base_peak_intensity is not None):
            assert _close(scan.base_peak_intensity, row["header_base_peak_intensity"], 1e-9)
            assert _close(scan.base_peak_mz, row["header_base_peak_mz"], 1e-9)
        if row["ion_injection_time_ms"]:
            assert _close(scan.injection_time_ms, row["ion_injection_time_ms"], 1e-9)
        if row["precursor_mz"]:
            assert _close(scan.precursor_mz, row["precursor_mz"], 1e-9)  # spectra.tsv
        if row["precursor_charge"] and "," not in row["precursor_charge"]:
            assert scan.precursor_charge == int(row["precursor_charge"])
        elif row["precursor_charge"]:
            assert scan.precursor_charge is None  # several possible charges: unknown
        _check_arrays(scan, row)


def _check_arrays(scan: Scan, row: dict[str, str]) -> None:
    rel = 1e-6 if "32-bit" in row["intensity_array"] else 1e-9  # README: float32 / float64
    if scan.ms_level != 1:
        assert scan.mz is None
        assert scan.intensity is None
        if row["file"].endswith(".mgf"):  # MGF TIC/base peak come from the peak list
            assert _close(scan.tic, row["computed_sum_intensity"], 1e-9)
            assert _close(scan.base_peak_intensity, row["computed_max_intensity"], 1e-9)
        return
    assert scan.mz is not None
    assert scan.intensity is not None
    assert scan.mz.dtype == np.float64
    assert scan.intensity.dtype == np.float64
    assert scan.mz.size == int(row["n_points"])  # spectra.tsv n_points
    assert bool(np.all(np.diff(scan.mz) >= 0))  # m/z ascending (Scan contract)
    assert _close(float(scan.intensity.sum()), row["computed_sum_intensity"], rel)
    if scan.mz.size:
        assert _close(float(scan.intensity.max()), row["computed_max_intensity"], rel)
        assert _close(float(scan.mz.min()), row["computed_min_mz"], 1e-9)
        assert _close(float(scan.mz.max()), row["computed_max_mz"], 1e-9)


def test_both_encodings_of_test_mzml_give_the_same_intensity_sum() -> None:
    """test.mzML stores one spectrum uncompressed/64-bit and zlib/32-bit: both sum to 69381840."""
    scans = _read(REFERENCE / "mzml" / "test.mzML")
    for scan in scans:
        assert scan.intensity is not None
        # reference/README.md: "they do: 69381840 for intensity" (float32 data: rel 1e-6)
        assert math.isclose(float(scan.intensity.sum()), 69381840.0, rel_tol=1e-6)
    assert scans[0].mz is not None
    assert scans[1].mz is not None
    np.testing.assert_allclose(scans[0].mz, scans[1].mz, rtol=1e-6)


@pytest.mark.parametrize("name", ["mini.chrom.mzML", "mini_numpress.chrom.mzML"])
def test_chromatogram_only_files_yield_no_scans(name: str) -> None:
    """A chromatogram-only (SRM) file opens and yields nothing (files.tsv: 0 spectra)."""
    assert _read(REFERENCE / "mzml" / name) == []


def test_numpress_decoded_by_accession_matches_reference() -> None:
    """The Numpress chromatogram decodes by accession to chromatograms.tsv's values."""
    ns = {"m": "http://psi.hupo.org/ms/mzml"}
    tree = etree.parse(str(REFERENCE / "mzml" / "mini_numpress.chrom.mzML"))
    arrays = {}
    for bda in tree.iterfind(".//m:chromatogram//m:binaryDataArray", ns):
        accessions = [p.get("accession") for p in bda.iterfind("m:cvParam", ns)]
        compression = next(a for a in accessions if a in ("MS:1002312", "MS:1002313"))
        kind = "time" if "MS:1000595" in accessions else "intensity"
        arrays[kind] = decode_array(
            bda.findtext("m:binary", namespaces=ns),
            compression=compression,
            dtype="<f8",
            expected_length=176,
        )
    row = next(r for r in tsv_rows("chromatograms.tsv") if "numpress" in r["file"])
    # chromatograms.tsv: first_time, last_time, sum_intensity (accession-keyed decode)
    assert math.isclose(arrays["time"][0], float(row["first_time"]), rel_tol=1e-9)
    assert math.isclose(arrays["time"][-1], float(row["last_time"]), rel_tol=1e-9)
    assert math.isclose(arrays["intensity"].sum(), float(row["sum_intensity"]), rel_tol=1e-9)


def _tiny_with_numpress(accession: bytes, name: bytes) -> bytes:
    """tiny.pwiz with the first MS1 intensity array re-encoded as Numpress linear."""
    data = TINY.read_bytes()
    at = data.index(b'accession="MS:1000515"')
    start = data.index(b"<binary>", at) + len(b"<binary>")
    end = data.index(b"</binary>", start)
    values = np.frombuffer(base64.b64decode(data[start:end]), dtype="<f8")
    fixed = pynumpress.optimal_linear_fixed_point(values)
    encoded = base64.b64encode(pynumpress.encode_linear(values, fixed).tobytes())
    block_start = data.rindex(b"<binaryDataArray ", 0, at)
    block = data[block_start:end].replace(
        b'accession="MS:1000576" name="no compression"',
        b'accession="' + accession + b'" name="' + name + b'"',
    )
    block = block[: block.index(b"<binary>") + len(b"<binary>")] + encoded
    return data[:block_start] + block + data[end:]


def test_numpress_spectrum_is_decoded_by_accession_not_name(tmp_path: Path) -> None:
    """A Numpress-linear array named as 'positive integer' still decodes by its accession."""
    # Name/accession mismatch is the trap of reference/README.md pitfall 1.
    data = _tiny_with_numpress(b"MS:1002312", b"MS-Numpress positive integer compression")
    path = write(tmp_path, "QC_numpress.mzML", data)
    scans = _read(path)
    assert scans[0].intensity is not None
    # Original values 15, 14, ..., 1 (tiny.pwiz arrays); Numpress linear is lossy below 1e-6.
    np.testing.assert_allclose(scans[0].intensity, np.arange(15.0, 0.0, -1.0), rtol=1e-6)


def test_undecodable_compression_is_refused_naming_the_term(tmp_path: Path) -> None:
    """An array compressed with Numpress+zstd is refused as unsupported, naming the CV term."""
    data = _tiny_with_numpress(b"MS:1003783", b"whatever")
    path = write(tmp_path, "QC_zstd.mzML", data)
    with pytest.raises(ReadError) as info:
        _read(path)
    assert info.value.kind == "unsupported"
    # Name from the PSI-MS CV (psims' bundled copy; reference/README.md, mzml-cv-terms.tsv)
    assert "MS:1003783" in info.value.reason
    assert "zstd" in info.value.reason


def test_unsupported_compression_in_ms2_is_not_an_error(tmp_path: Path) -> None:
    """MS2 arrays are never decoded, so their compression does not matter."""
    data = TINY.read_bytes()
    ms2 = data.index(b'id="scan=20"')
    head, tail = data[:ms2], data[ms2:]
    nxt = tail.index(b"</spectrum>")
    tail = tail[:nxt].replace(b"MS:1000576", b"MS:1003783") + tail[nxt:]
    path = write(tmp_path, "S01_ms2.mzML", head + tail)
    assert [s.ms_level for s in _read(path)] == [1, 2, 1, 1]


def _fields(scan: Scan) -> tuple[Any, ...]:
    return (
        scan.index,
        scan.ms_level,
        scan.rt_s,
        scan.tic,
        scan.base_peak_mz,
        scan.base_peak_intensity,
        scan.injection_time_ms,
        scan.precursor_mz,
        scan.precursor_charge,
        scan.is_profile,
        scan.polarity,
    )


@pytest.mark.parametrize("source", [TINY, EXAMPLE], ids=["tiny", "example"])
def test_gzip_and_plain_give_identical_scans(tmp_path: Path, source: Path) -> None:
    """The same run read as mzML (index-guided) and as mzML.gz (streaming) gives equal scans."""
    plain = _read(source)
    packed = _read(write(tmp_path, source.name + ".gz", gz(source.read_bytes())))
    assert [_fields(s) for s in plain] == [_fields(s) for s in packed]
    for a, b in zip(plain, packed, strict=True):
        if a.mz is None:
            assert b.mz is None
        else:
            assert b.mz is not None
            assert b.intensity is not None
            assert a.intensity is not None
            assert np.array_equal(a.mz, b.mz)
            assert np.array_equal(a.intensity, b.intensity)


def test_indexed_file_is_read_through_its_index(monkeypatch: pytest.MonkeyPatch) -> None:
    """tiny.pwiz (valid index) never touches the streaming reader."""

    def no_streaming(*_args: Any, **_kwargs: Any) -> Any:
        raise AssertionError("streaming path used")

    monkeypatch.setattr(mzml, "stream_scans", no_streaming)
    assert len(_read(TINY)) == 4  # files.tsv n_spectra


def test_index_missing_a_spectrum_falls_back_to_streaming() -> None:
    """example.mzML's index lists 10 of its 11 spectra: all 11 are still read, in order."""
    scans = _read(EXAMPLE)
    assert [s.index for s in scans] == list(range(11))  # files.tsv n_spectra = 11


@pytest.mark.parametrize("inline", [False, True], ids=["xml-header", "byte-header"])
def test_precursor_without_selected_mz_uses_isolation_target(tmp_path: Path, inline: bool) -> None:
    """Without a selected ion m/z the isolation window target is the precursor m/z."""
    data = TINY.read_bytes()
    data = bf.inline_param_groups(data) if inline else data
    start = data.index(b'accession="MS:1000744"', data.index(b'id="scan=20"'))
    line_start = data.rindex(b"<cvParam", 0, start)
    line_end = data.index(b"/>", start) + 2
    path = write(tmp_path, "QC_iso.mzML", bf.reindexed(data[:line_start] + data[line_end:]))
    scans = _read(path)
    # tiny.pwiz.1.1.mzML scan=20: isolation window target m/z 445.3, charge 2 (from the file)
    assert scans[1].precursor_mz == pytest.approx(445.3, rel=1e-12)
    assert scans[1].precursor_charge == 2


def test_empty_spectrum_index_falls_back_to_streaming(tmp_path: Path) -> None:
    """An indexedmzML whose spectrum index is empty still yields all of its spectra."""
    data = bf.as_indexed(bf.PLAIN.read_bytes())
    start = data.index(b'<index name="spectrum">') + len(b'<index name="spectrum">')
    end = data.index(b"</index>", start)
    path = write(tmp_path, "QC_noentries.mzML", data[:start] + data[end:])
    assert len(_read(path)) == 3  # files.tsv: adv_mzqc_in_mzml.mzML has 3 spectra


def test_ms1_arrays_off_decodes_nothing() -> None:
    """With ms1_arrays=False no arrays are decoded, header values still come through."""
    scans = _read(EXAMPLE, ms1_arrays=False)
    assert all(s.mz is None and s.intensity is None for s in scans)
    assert all(s.tic is not None for s in scans)


def test_run_header_carries_start_time_stamp() -> None:
    """RunHeader.acquired_at_iso is <run startTimeStamp> as written (tiny.pwiz.1.1.mzML)."""
    with open_run(TINY) as (header, _scans):
        assert header.format == "mzML"
        assert header.acquired_at_iso == "2007-06-27T15:23:45.00035"  # from the file itself
        assert header.n_spectra_declared == 4


def test_progress_reports_bytes_and_finishes(tmp_path: Path) -> None:
    """progress(done, total) is called with byte counts, ends at total, and is rate-limited."""
    path = write(tmp_path, "QC_big.mzML.gz", gz(EXAMPLE.read_bytes()))
    calls: list[tuple[int, int]] = []
    started = time.monotonic()
    _read(path, progress=lambda done, total: calls.append((done, total)))
    elapsed_s = time.monotonic() - started
    size = path.stat().st_size
    assert calls
    assert calls[-1] == (size, size)
    assert all(0 <= done <= total == size for done, total in calls)
    assert len(calls) <= 2 + elapsed_s / 0.05  # at most ~20 calls a second, plus the final one


def test_no_network_while_reading(monkeypatch: pytest.MonkeyPatch) -> None:
    """Loading the CV and reading every mzML makes zero urlopen calls."""
    import psims.controlled_vocabulary.controlled_vocabulary as psims_cv

    calls: list[object] = []

    def refuse(*args: object, **_kwargs: object) -> None:
        calls.append(args)
        raise OSError("network disabled in this test")

    monkeypatch.setattr(urllib.request, "urlopen", refuse)
    monkeypatch.setattr(psims_cv, "urlopen", refuse)
    monkeypatch.setattr(psims_cv.obo_cache, "use_remote", True)  # as a fresh process has it
    cv.load_cv.cache_clear()
    try:
        assert cv.term_name("MS:1000574") == "zlib compression"  # PSI-MS CV
        for path in sorted((REFERENCE / "mzml").glob("*.mzML")):
            _read(path)
    finally:
        cv.load_cv.cache_clear()
    assert calls == []


def test_progress_is_throttled() -> None:
    """A burst of 10 000 progress points within a few ms reaches the callback at most twice."""
    from watcher.measure.readers.read import _Throttle

    calls: list[int] = []
    throttle = _Throttle(lambda done, _total: calls.append(done), 10_000)
    started = time.monotonic()
    for done in range(10_000):
        throttle.at(done)
    elapsed_s = time.monotonic() - started
    assert len(calls) <= 1 + elapsed_s / 0.05  # 50 ms between calls (~20/s, the brief's limit)
    assert calls[0] == 0  # the first point is reported at once
