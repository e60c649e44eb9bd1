"""Index-guided mzML reading: arrays cut from the bytes agree with the XML parse, errors alike."""

from __future__ import annotations

import os
import re
from typing import TYPE_CHECKING

import numpy as np
import pytest

from synth import CalibrantTruth, RunSpec, write_mzml
from tests.helpers import badfiles as bf
from watcher.errors import ReadError
from watcher.measure.readers import mzml, safexml
from watcher.measure.readers import mzml_index as mzmlindex
from watcher.measure.readers.read import open_run
from watcher.measure.scan import NON_MS1_FIELDS, Scan

if TYPE_CHECKING:
    from collections.abc import Callable
    from pathlib import Path

_SPEC = RunSpec(
    duration_s=60.0,
    ms1_interval_s=2.0,
    ms2_per_cycle=2,
    ms2_peaks=20,
    profile=False,
    background_peaks=60,
    calibrants=[CalibrantTruth(name="siloxane-445", mz=445.120025, offset_ppm=1.8)],
    seed=11,
)


def _scans(path: Path) -> list[Scan]:
    with open_run(path) as (_header, scans):
        return list(scans)


def _pair(tmp_path: Path) -> tuple[Path, Path]:
    indexed, plain = tmp_path / "QC_idx.mzML", tmp_path / "QC_plain.mzML"
    write_mzml(indexed, _SPEC, indexed=True)
    write_mzml(plain, _SPEC, indexed=False)
    return indexed, plain


def _same(a: list[Scan], b: list[Scan]) -> None:
    assert len(a) == len(b)
    for x, y in zip(a, b, strict=True):
        assert (x.ms_level, x.rt_s, x.precursor_charge) == (
            y.ms_level,
            y.rt_s,
            y.precursor_charge,
        )
        if x.ms_level == 1:
            assert x.tic == y.tic
            assert x.mz is not None
            assert y.mz is not None
            assert np.array_equal(x.mz, y.mz)
            assert np.array_equal(x.intensity, y.intensity)


def test_indexed_read_equals_the_streaming_parse(tmp_path: Path) -> None:
    """Through the index (arrays cut from bytes) the scans equal lxml's parse of the same run."""
    # Reference: the lxml iterparse path of the project, on the same generated run.
    indexed, plain = _pair(tmp_path)
    scans = _scans(indexed)
    assert sum(scan.ms_level == 1 for scan in scans) == 30  # 60 s at one MS1 per 2 s
    _same(scans, _scans(plain))


def test_wrapped_base64_and_unusual_layout_still_decode(tmp_path: Path) -> None:
    """Line-wrapped base64 and a userParam in an array give the same values as plain layout."""
    indexed, plain = _pair(tmp_path)
    data = indexed.read_bytes()

    # RFC 2045 wraps base64 at 76 characters; mzML allows whitespace inside <binary>.
    def wrap(match: re.Match[bytes]) -> bytes:
        text = match.group(1)
        lines = [text[i : i + 76] for i in range(0, len(text), 76)]
        return b"<binary>" + b"\n".join(lines) + b"</binary>"

    wrapped = re.sub(rb"<binary>([^<]*)</binary>", wrap, data)
    odd = wrapped.replace(
        b"<binary>", b'<userParam name="note" value="x"/>\n<binary>', 1
    )  # not the plain layout: left to the XML parse
    path = bf.write(tmp_path, "QC_wrapped.mzML", bf.reindexed(odd))
    _same(_scans(path), _scans(plain))


def test_bad_base64_reads_as_the_xml_path_words_it(tmp_path: Path) -> None:
    """A damaged MS1 array fails with the spectrum named, as the streaming reader says it."""
    indexed, plain = _pair(tmp_path)
    errors = []
    for path in (indexed, plain):
        data = path.read_bytes()
        at = data.index(b"<binary>") + len(b"<binary>") + 4
        broken = bf.write(tmp_path, "bad_" + path.name, data[:at] + b"!" + data[at + 1 :])
        with pytest.raises(ReadError) as info:
            _scans(broken)
        errors.append(info.value.reason)
    assert "invalid base64" in errors[0]
    assert "spectrum 0 (" in errors[0]
    assert errors[0] == errors[1]


def _doubt_at(path: Path) -> int | None:
    """Where index-guided reading of ``path`` doubts its index (None: read to the end)."""
    fd = os.open(path, os.O_RDONLY)
    try:
        index = mzmlindex.load_offset_index(fd, os.fstat(fd).st_size)
        assert index is not None
        with path.open("rb") as source:
            events = safexml.safe_iterparse(source, events=("start", "end"), tag=mzml.stream_tags())
            pre = mzml.read_preamble(events)
            scans = mzmlindex.indexed_scans(
                fd, index, pre, want_arrays=True, parse=safexml.parse_fragment
            )
            try:
                for _scan in scans:
                    pass
            except mzmlindex.IndexDoubt as doubt:
                return doubt.position
        return None
    finally:
        os.close(fd)


def test_offset_index_is_compact_and_checked(tmp_path: Path) -> None:
    """The index holds 8-byte starts and one id blob; an offset off its <spectrum is doubted."""
    indexed, _plain = _pair(tmp_path)
    fd = os.open(indexed, os.O_RDONLY)
    try:
        index = mzmlindex.load_offset_index(fd, os.fstat(fd).st_size)
    finally:
        os.close(fd)
    assert index is not None
    assert index.starts.itemsize == 8
    assert index.id_ends.itemsize == 8
    assert isinstance(index.ids, bytes)
    assert len(index.starts) == 90  # 30 MS1 + 2 MS2 each
    assert (index.id_ref(0), index.id_ref(89)) == (b"scan=1", b"scan=90")  # synth's ids
    assert _doubt_at(indexed) is None
    data = indexed.read_bytes()
    first = index.starts[1]
    moved = data.replace(b">%d</offset>" % first, b">%d</offset>" % (first + 1), 1)
    path = bf.write(tmp_path, "QC_moved.mzML", moved)
    assert _doubt_at(path) == 1
    _same(_scans(path), _scans(indexed))  # streamed from spectrum 1 on, same scans


def _wrong_id_ref(data: bytes) -> bytes:
    return data.replace(b'idRef="scan=46"', b'idRef="scan=460"', 1)


def _wrong_index_attr(data: bytes) -> bytes:
    return data.replace(b'<spectrum index="45" ', b'<spectrum index="47" ', 1)


def _left_out(data: bytes) -> bytes:
    return re.sub(rb'\s*<offset idRef="scan=46">\d+</offset>', b"", data, count=1)


@pytest.mark.parametrize("edit", [_wrong_id_ref, _wrong_index_attr, _left_out])
def test_index_wrong_midway_reads_as_the_streaming_parse(
    tmp_path: Path, edit: Callable[[bytes], bytes]
) -> None:
    """A wrong idRef, index="" or missing entry at spectrum 45 streams on from there, same scans."""
    # Reference: the lxml streaming path on the same body bytes (the non-indexed twin, same
    # edit); spectrum 45 is an MS1 scan (one MS1 then 2 MS2 per cycle in _SPEC).
    indexed, plain = _pair(tmp_path)
    path = bf.write(tmp_path, "QC_edited.mzML", edit(indexed.read_bytes()))
    streamed = bf.write(tmp_path, "QC_edited_plain.mzML", edit(plain.read_bytes()))
    assert path.read_bytes() != indexed.read_bytes()
    assert _doubt_at(path) == 45
    scans, reference = _scans(path), _scans(streamed)
    assert [scan.index for scan in scans] == list(range(90))
    _same(scans, reference)


def _both_paths(path: Path) -> tuple[list[Scan], list[Scan]]:
    """The scans of ``path`` through its offset index and through lxml streaming, no fallback."""
    fd = os.open(path, os.O_RDONLY)
    try:
        index = mzmlindex.load_offset_index(fd, os.fstat(fd).st_size)
        assert index is not None  # the index path must really be the one under test
        with path.open("rb") as source:
            events = safexml.safe_iterparse(source, events=("start", "end"), tag=mzml.stream_tags())
            pre = mzml.read_preamble(events)
            indexed = list(
                mzmlindex.indexed_scans(
                    fd, index, pre, want_arrays=True, parse=safexml.parse_fragment
                )
            )
            streamed = list(mzml.stream_scans(events, pre, want_arrays=True))
    finally:
        os.close(fd)
    return indexed, streamed


def _all_fields_equal(a: Scan, b: Scan) -> None:
    # Past MS1 the contract is NON_MS1_FIELDS (scan.py): the index path reads only those.
    names = Scan.__slots__ if a.ms_level == 1 or b.ms_level == 1 else NON_MS1_FIELDS
    for name in names:
        x, y = getattr(a, name), getattr(b, name)
        if isinstance(x, np.ndarray) or isinstance(y, np.ndarray):
            assert x is not None, name
            assert y is not None, name
            assert np.array_equal(x, y, equal_nan=True), name
        else:
            assert x == y, (a.index, name, x, y)


@pytest.mark.parametrize(
    "source",
    ["synth", "tiny.pwiz.1.1.mzML", "example.mzML", "test.mzML", "synth-ms2-odd"],
)
def test_every_scan_field_from_the_index_equals_the_streaming_parse(
    tmp_path: Path, source: str
) -> None:
    """Every MS1 Scan field, and every MS2 field the metrics read, equals the streaming parse."""
    # Reference: the project's lxml iterparse path on the same bytes; the files are the synth
    # run and the indexed reference files (HUPO-PSI / pymzML / pyteomics, reference/README.md).
    if source.startswith("synth"):
        path = tmp_path / "QC_idx.mzML"
        write_mzml(path, _SPEC, indexed=True)
        if source == "synth-ms2-odd":
            # Headers off the plain layout: a minute unit, a param without name, an
            # unknown time unit, an entity in a value -- each must leave the fast path alone.
            data = path.read_bytes()
            data = data.replace(
                b'unitAccession="UO:0000028" unitName="millisecond"',
                b'unitAccession="UO:0000031" unitName="minute"',
                3,
            )
            data = data.replace(
                b'accession="MS:1000041" name="charge state" ', b'accession="MS:1000041" ', 2
            )
            data = data.replace(
                b'unitAccession="UO:0000010" unitName="second"',
                b'unitAccession="UO:0000099" unitName="second"',
                4,
            )
            data = data.replace(b'name="selected ion m/z"', b'name="selected ion m&#47;z"', 2)
            path = bf.write(tmp_path, "QC_odd.mzML", bf.reindexed(data))
    elif source == "tiny.pwiz.1.1.mzML":
        path = bf.TINY  # its own index checks out
    else:  # these two carry offsets the loader doubts: a recomputed index, same body bytes
        data = (bf.REFERENCE / "mzml" / source).read_bytes()
        path = bf.write(tmp_path, source, bf.reindexed(data))
    indexed, streamed = _both_paths(path)
    assert len(indexed) == len(streamed) > 0
    assert [s.index for s in indexed] == list(range(len(streamed)))
    if source.startswith("synth"):
        assert sum(s.ms_level == 2 for s in indexed) == 60  # 2 MS2 per MS1 in _SPEC
        assert all(s.precursor_charge is not None for s in indexed if s.ms_level == 2)
    for a, b in zip(indexed, streamed, strict=True):
        _all_fields_equal(a, b)
