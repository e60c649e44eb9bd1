"""Whole but imperfect run files are measured, with a note; only unreadable data is refused.

Each file here is an open example file of tests/data/ (licences in tests/data/LICENSES) or a
synth/ run, changed the way tools and transfers change files in the field: CRLF line ends,
bytes inserted by a patching tool, an excerpt that kept the original's index, a wrong SHA-1,
spectra whose arrays are missing or shorter than declared, negative retention times. The MS1
and MS2 counts and the RT range are checked against pyteomics 5 reading the same bytes
sequentially (``use_index=False``), an independent reader of mzML, mzXML and MGF.
"""

from __future__ import annotations

import functools
import gc
import gzip
import hashlib
import io
import re
import warnings
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

import pytest
from pyteomics import mgf as pt_mgf
from pyteomics import mzml as pt_mzml
from pyteomics import mzxml as pt_mzxml

from synth import RunSpec, write_mzml
from tests.helpers import badfiles as bf
from watcher.config import Config, load_default
from watcher.errors import ReadError
from watcher.measure.readers.read import STALE_INDEX_NOTE
from watcher.measure.run import measure_file
from watcher.rules.judge import judge

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.records import RunMetrics

NOW = datetime(2026, 12, 3, 6, 0, tzinfo=UTC)
CONFIG = Config()  # no calibrants or ions: every MS1 array is still decoded below where wanted
DAMAGED_WORDS = "without usable peak arrays"


def _with_arrays() -> Config:
    """The built-in config: calibrants and expected ions, so MS1 arrays are decoded."""
    return load_default()


def _reference_counts(path: Path) -> tuple[int, int, float | None, float | None]:
    """(MS1, MS2, first RT s, last RT s) as pyteomics reads the file sequentially.

    Negative times are left out: they are the writers' "unknown" (common practice; pyteomics
    hands them on as numbers, so the convention is applied here, to its values)."""
    data = path.read_bytes()
    if data[:2] == b"\x1f\x8b":
        data = gzip.decompress(data)
    levels: list[int] = []
    times_s: list[float] = []
    if b"<mzXML" in data[:4096]:
        with pt_mzxml.read(io.BytesIO(data), use_index=False, decode_binary=False) as reader:
            for rec in reader:
                levels.append(int(rec["msLevel"]))
                rt = rec.get("retentionTime")
                if rt is not None and not str(rt).startswith("-"):
                    times_s.append(float(rt) * 60.0)  # pyteomics: minutes
    elif b"BEGIN IONS" in data:
        with pt_mgf.read(io.StringIO(data.decode()), use_index=False) as reader:
            for spectrum in reader:
                levels.append(2)
                rt = spectrum["params"].get("rtinseconds")
                if rt is not None:
                    times_s.append(float(rt))
    else:
        source = io.BytesIO(data)
        with pt_mzml.MzML(source, use_index=False, decode_binary=False, cv=_psims_cv()) as reader:
            for spectrum in reader:
                levels.append(int(spectrum["ms level"]))
                scan = spectrum["scanList"]["scan"][0]
                rt = scan.get("scan start time")
                if rt is not None:
                    unit = getattr(rt, "unit_info", "minute") or "minute"
                    times_s.append(float(rt) * (1.0 if unit.startswith("second") else 60.0))
    kept = [t for t in times_s if t >= 0]
    return (
        levels.count(1),
        levels.count(2),
        min(kept) if kept else None,
        max(kept) if kept else None,
    )


@functools.cache
def _psims_cv() -> Any:
    """psims' bundled PSI-MS CV for pyteomics, loaded once with remote fetching off."""
    from psims.controlled_vocabulary import controlled_vocabulary as pcv

    pcv.obo_cache.use_remote = False
    with warnings.catch_warnings():
        # psims leaves its vendored .obo.gz handle to the garbage collector.
        warnings.simplefilter("ignore", ResourceWarning)
        cv = pcv.load_psims()
        gc.collect()
    return cv


def _assert_matches_reference(metrics: RunMetrics, path: Path) -> None:
    ms1, ms2, rt_lo, rt_hi = _reference_counts(path)  # pyteomics 5, sequential
    signal = metrics.signal
    assert (signal.ms1_count, signal.ms2_count) == (ms1, ms2)
    assert signal.rt_start_s == pytest.approx(rt_lo, abs=1e-6)
    assert signal.rt_end_s == pytest.approx(rt_hi, abs=1e-6)


def _synth(tmp_path: Path, name: str = "QC_base.mzML", **kwargs: Any) -> Path:
    path = tmp_path / name
    spec = RunSpec(duration_s=60.0, ms1_interval_s=2.0, ms2_per_cycle=1, background_peaks=20)
    write_mzml(path, spec, **kwargs)
    return path


def _stale_notes(metrics: RunMetrics) -> list[str]:
    return [n for n in metrics.notes if n.startswith(STALE_INDEX_NOTE)]


# --- stale index -----------------------------------------------------------------------


def test_crlf_converted_file_is_read_without_its_index(tmp_path: Path) -> None:
    """A transfer that turned LF into CRLF moves every offset and breaks the SHA-1: measured,
    with the stale-index note, ``file.checksum_ok`` false, counts as pyteomics reads them."""
    base = _synth(tmp_path)
    crlf = bf.write(tmp_path, "QC_crlf.mzML", base.read_bytes().replace(b"\n", b"\r\n"))
    metrics = measure_file(crlf, _with_arrays())
    assert len(_stale_notes(metrics)) == 1
    assert metrics.file_checks.checksum_ok is False
    assert metrics.flat()["file.checksum_ok"] is False
    _assert_matches_reference(metrics, crlf)
    # The same run unconverted: index used, no note, checksum true (synth writes a real SHA-1).
    clean = measure_file(base, _with_arrays())
    assert _stale_notes(clean) == []
    assert clean.file_checks.checksum_ok is True
    assert clean.signal == metrics.signal


def test_patched_spectrum_offsets_fall_back_to_streaming(tmp_path: Path) -> None:
    """Bytes inserted before the spectra by a patching tool, with indexListOffset (and the
    SHA-1) rewritten but the spectrum offsets kept: read by streaming, with the note."""
    data = bf.TINY.read_bytes()
    at = data.index(b"<spectrum ")
    patched = data[:at] + b"<!-- annotated by the lab's renaming tool -->\n" + data[at:]
    index_at = patched.index(b"<indexList")
    patched = re.sub(
        rb"<indexListOffset>\d+</indexListOffset>",
        b"<indexListOffset>%d</indexListOffset>" % index_at,
        patched,
    )
    cut = patched.rindex(b"<fileChecksum>") + len(b"<fileChecksum>")
    digest = hashlib.sha1(patched[:cut]).hexdigest().encode()  # noqa: S324 - mzML's checksum
    patched = patched[:cut] + digest + patched[cut + 40 :]
    path = bf.write(tmp_path, "QC_patched.mzML", patched)
    metrics = measure_file(path, _with_arrays())
    assert len(_stale_notes(metrics)) == 1
    assert metrics.file_checks.checksum_ok is True
    _assert_matches_reference(metrics, path)


def test_excerpt_with_the_originals_index_is_measured() -> None:
    """pyteomics' test.mzML keeps its source file's indexListOffset (5098921, past its end;
    tests/data/README.md): measured with the note, MS1=2 as files.tsv and pyteomics say."""
    path = bf.REFERENCE / "mzml" / "test.mzML"
    metrics = measure_file(path, CONFIG)
    notes = _stale_notes(metrics)
    assert len(notes) == 1
    assert "5098921" in notes[0]
    assert metrics.signal.ms1_count == 2  # tests/data/files.tsv n_spectra / ms_levels
    # The excerpt kept its source's SHA-1 too: it cannot match the excerpt's bytes.
    assert metrics.file_checks.checksum_ok is False
    _assert_matches_reference(metrics, path)


def test_merged_files_are_measured_through_the_stream(tmp_path: Path) -> None:
    """Two runs' spectrum lists joined into one file under the first file's index: whole,
    read by streaming, every spectrum of both counted."""
    first = _synth(tmp_path, "QC_a.mzML").read_bytes()
    second = _synth(tmp_path, "QC_b.mzML").read_bytes()
    open_at = second.index(b"<spectrum ")
    close_at = second.index(b"</spectrumList>")
    body = re.sub(rb'index="(\d+)"', lambda m: b'index="%d"' % (int(m.group(1)) + 10_000),
                  second[open_at:close_at]).replace(b'id="', b'id="b-')  # fmt: skip
    cut = first.index(b"</spectrumList>")
    merged = first[:cut] + body + first[cut:]
    path = bf.write(tmp_path, "QC_merged.mzML", merged)
    metrics = measure_file(path, CONFIG)
    assert len(_stale_notes(metrics)) == 1
    _assert_matches_reference(metrics, path)
    single = measure_file(tmp_path / "QC_a.mzML", CONFIG)
    assert metrics.signal.ms1_count == 2 * single.signal.ms1_count


# --- checksum ------------------------------------------------------------------------------


@pytest.mark.parametrize("gz", [False, True])
def test_wrong_sha1_is_measured_with_checksum_false(tmp_path: Path, gz: bool) -> None:
    """A wrong SHA-1 fileChecksum (mzML 1.1: SHA-1 of the bytes through <fileChecksum>) is
    measured; ``file.checksum_ok`` is false, true for the file as written, in .mzML.gz too."""
    good = _synth(tmp_path, "QC_sum.mzML").read_bytes()
    at = good.rindex(b"</fileChecksum>") - 1
    bad = good[:at] + (b"0" if good[at : at + 1] != b"0" else b"1") + good[at + 1 :]
    suffix = ".mzML.gz" if gz else ".mzML"
    for data, expected in ((good, True), (bad, False)):
        packed = gzip.compress(data, mtime=0) if gz else data
        path = bf.write(tmp_path, f"QC_{expected}{suffix}", packed)
        metrics = measure_file(path, _with_arrays())
        assert metrics.file_checks.checksum_ok is expected
        assert _stale_notes(metrics) == []
        _assert_matches_reference(metrics, path)


def test_files_without_a_sha1_have_checksum_null() -> None:
    """No SHA-1 to compare (example.mzML writes "MZMLDemoFile"; mzXML and MGF have no
    fileChecksum): ``file.checksum_ok`` is null."""
    for name in ("mzml/example.mzML", "mzxml/test.mzXML", "mgf/test.mgf"):
        metrics = measure_file(bf.REFERENCE / name, CONFIG)
        assert metrics.flat()["file.checksum_ok"] is None, name


def test_built_in_config_warns_on_a_wrong_checksum(tmp_path: Path) -> None:
    """The built-in config (watcher/data/default.yaml) turns checksum_ok false into a warning
    and says nothing when it is true or null."""
    config = load_default()
    good = _synth(tmp_path, "QC_sum.mzML").read_bytes()
    at = good.rindex(b"</fileChecksum>") - 1
    bad = good[:at] + (b"0" if good[at : at + 1] != b"0" else b"1") + good[at + 1 :]
    path = bf.write(tmp_path, "QC_badsum.mzML", bad)
    found = judge(
        measure_file(path, config),
        file_name=path.name,
        acquired_at=NOW,
        checks=config.checks,
        history=None,
    )
    on_file = [f for f in found.findings if f.metric == "file.checksum_ok"]
    assert [str(f.severity) for f in on_file] == ["warning"]
    clean = judge(
        measure_file(tmp_path / "QC_sum.mzML", config),
        file_name="QC_sum.mzML",
        acquired_at=NOW,
        checks=config.checks,
        history=None,
    )
    assert not [f for f in clean.findings if f.metric == "file.checksum_ok"]


# --- damaged spectra -------------------------------------------------------------------------

_BINARY_RE = re.compile(rb"<binary>[^<]*</binary>")


def _spectra_spans(data: bytes) -> list[tuple[int, int]]:
    return [
        (m.start(), data.index(b"</spectrum>", m.start()))
        for m in re.finditer(rb"<spectrum\s", data)
    ]


def _ms1_spans(data: bytes) -> list[tuple[int, int]]:
    return [
        (a, b) for a, b in _spectra_spans(data) if b'accession="MS:1000511"' in data[a:b]
        and re.search(rb'accession="MS:1000511"[^>]*value="1"', data[a:b])
    ]  # fmt: skip


def _empty_arrays(data: bytes, spans: list[tuple[int, int]]) -> bytes:
    """Each spectrum in ``spans`` with its <binary> texts emptied; defaultArrayLength kept."""
    for start, end in reversed(spans):
        data = data[:start] + _BINARY_RE.sub(b"<binary></binary>", data[start:end]) + data[end:]
    return data


def test_empty_and_missing_arrays_count_as_empty_spectra(tmp_path: Path) -> None:
    """Two MS1 spectra emptied (defaultArrayLength kept) and one without its intensity array:
    measured, one note giving 3 spectra, counts and RT range as pyteomics reads them."""
    data = _synth(tmp_path, indexed=False, compression="none").read_bytes()
    spans = _ms1_spans(data)
    data = _empty_arrays(data, spans[1:3])
    start, end = _ms1_spans(data)[5]
    element = data[start:end]
    second = element.index(b"<binaryDataArray ", element.index(b"<binaryDataArray ") + 1)
    closing = element.index(b"</binaryDataArray>", second) + len(b"</binaryDataArray>")
    element = element[:second] + element[closing:]
    data = data[:start] + element + data[end:]
    path = bf.write(tmp_path, "QC_holes.mzML", data)
    metrics = measure_file(path, _with_arrays())
    damaged = [n for n in metrics.notes if DAMAGED_WORDS in n]
    assert len(damaged) == 1
    assert damaged[0].startswith("3 spectra ")
    _assert_matches_reference(metrics, path)


def test_damaged_arrays_through_the_index_are_counted_too(tmp_path: Path) -> None:
    """The index-guided reader counts the same emptied spectrum (tiny.pwiz, re-indexed)."""
    data = bf.TINY.read_bytes()
    data = bf.reindexed(_empty_arrays(data, _ms1_spans(data)[:1]))
    path = bf.write(tmp_path, "QC_tiny_hole.mzML", data)
    metrics = measure_file(path, _with_arrays())
    assert next(n for n in metrics.notes if DAMAGED_WORDS in n).startswith("1 spectrum ")
    assert _stale_notes(metrics) == []
    _assert_matches_reference(metrics, path)


def test_a_file_where_no_spectrum_can_be_read_is_unreadable(tmp_path: Path) -> None:
    """Every spectrum emptied (adv_mzqc_in_mzml.mzML holds 3 MS1, files.tsv): unreadable."""
    data = bf.PLAIN.read_bytes()
    path = bf.write(tmp_path, "QC_void.mzML", _empty_arrays(data, _spectra_spans(data)))
    with pytest.raises(ReadError) as info:
        measure_file(path, _with_arrays())
    assert "no spectrum can be read: 3 spectra" in str(info.value)
    assert str(info.value).startswith("QC_void.mzML: unreadable: ")


def test_longer_array_than_declared_stays_unreadable(tmp_path: Path) -> None:
    """More values than declared is no short write: it stays an error (also how an inflate
    past the declared size shows), naming the spectrum."""
    data = bf.TINY.read_bytes()
    data = data.replace(b'defaultArrayLength="15"', b'defaultArrayLength="14"', 1)
    path = bf.write(tmp_path, "QC_long.mzML", bf.reindexed(data))
    with pytest.raises(ReadError) as info:
        measure_file(path, _with_arrays())
    assert "declared" in str(info.value)


def test_mzxml_scan_without_peaks_is_an_empty_scan(tmp_path: Path) -> None:
    """test.mzXML with its MS1 scan's <peaks> emptied (peaksCount 1313 kept): the MS2 scan
    keeps the file readable; the MS1 scan is counted. pyteomics 5 itself fails on an empty
    <peaks>, so the reference is pyteomics on the file before the change (only peaks differ)."""
    data = bf.MZXML.read_bytes()
    first = re.search(rb"(<peaks[^>]*>)[^<]*(</peaks>)", data)
    assert first is not None
    emptied = data[: first.end(1)] + data[first.start(2) :]
    path = bf.write(tmp_path, "QC_nopeaks.mzXML", emptied)
    metrics = measure_file(path, _with_arrays())
    assert next(n for n in metrics.notes if DAMAGED_WORDS in n).startswith("1 spectrum ")
    _assert_matches_reference(metrics, bf.MZXML)


# --- negative retention times ----------------------------------------------------------------


def test_negative_retention_times_are_missing(tmp_path: Path) -> None:
    """RTINSECONDS=-1 (MGF), scan start time -1 (mzML) and retentionTime -PT1S (mzXML) are
    missing values: the RT range comes from the other spectra."""
    mgf_data = bf.MGF.read_bytes()
    assert mgf_data.count(b"RTINSECONDS=") >= 1
    mgf_path = bf.write(
        tmp_path, "QC_rt.mgf", mgf_data.replace(b"RTINSECONDS=25", b"RTINSECONDS=-1", 1)
    )
    mgf_metrics = measure_file(mgf_path, CONFIG)
    _assert_matches_reference(mgf_metrics, mgf_path)
    mzxml_data = bf.MZXML.read_bytes().replace(
        b'retentionTime="PT353.43S"', b'retentionTime="-PT1S"'
    )
    mzxml_path = bf.write(tmp_path, "QC_rt.mzXML", mzxml_data)
    mzxml_metrics = measure_file(mzxml_path, _with_arrays())
    assert mzxml_metrics.signal.rt_start_s == pytest.approx(356.68)  # files.tsv rt_max_s
    _assert_matches_reference(mzxml_metrics, mzxml_path)
    tiny = bf.TINY.read_bytes()
    start_time = re.search(rb'(accession="MS:1000016"[^>]*value=")([^"]+)"', tiny)
    assert start_time is not None
    changed = tiny[: start_time.start(2)] + b"-1" + tiny[start_time.end(2) :]
    mzml_path = bf.write(tmp_path, "QC_rt.mzML", bf.reindexed(changed))
    mzml_metrics = measure_file(mzml_path, _with_arrays())
    _assert_matches_reference(mzml_metrics, mzml_path)
    assert mzml_metrics.signal.rt_start_s is not None
    assert mzml_metrics.signal.rt_start_s > 0


def test_crlf_converted_gz_is_measured_with_the_note(tmp_path: Path) -> None:
    """The same CRLF conversion inside a .mzML.gz (always streamed): the note and the checksum
    verdict come from the single decompressing pass."""
    base = _synth(tmp_path)
    packed = gzip.compress(base.read_bytes().replace(b"\n", b"\r\n"), mtime=0)
    path = bf.write(tmp_path, "QC_crlf.mzML.gz", packed)
    metrics = measure_file(path, _with_arrays())
    assert len(_stale_notes(metrics)) == 1
    assert metrics.file_checks.checksum_ok is False
    _assert_matches_reference(metrics, path)
