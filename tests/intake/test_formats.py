"""Format sniffing from content and structural completeness of whole files."""

from __future__ import annotations

import hashlib
from typing import TYPE_CHECKING

import pytest

from tests.helpers import badfiles as bf
from watcher.errors import ReadError
from watcher.intake.formats import (
    GunzipCheck,
    check_complete,
    checksum_ok,
    completeness,
    index_problem,
    sniff,
    sniff_format,
)

if TYPE_CHECKING:
    from pathlib import Path

# Expected formats: files.tsv `format` and `indexed` columns (tests/data).
WHOLE = {
    "mzml/tiny.pwiz.1.1.mzML": ("mzML", "indexedmzML"),
    "mzml/example.mzML": ("mzML", "indexedmzML"),
    "mzml/adv_mzqc_in_mzml.mzML": ("mzML", "mzML"),
    "mzml/mini.chrom.mzML": ("mzML", "mzML"),
    "mzml/mini_numpress.chrom.mzML": ("mzML", "mzML"),
    "mzxml/test.mzXML": ("mzXML", "mzXML"),
    "mgf/test.mgf": ("MGF", None),
    "mgf/test_pepmass.mgf": ("MGF", None),
}


@pytest.mark.parametrize("local_path", sorted(WHOLE))
def test_reference_files_sniff_and_are_complete(local_path: str) -> None:
    """Each whole reference file is recognised from content and passes completeness."""
    path = bf.REFERENCE / local_path
    found = sniff(path)
    assert (found.format, found.root) == WHOLE[local_path]  # files.tsv format / indexed
    assert completeness(path) is None
    check_complete(path)


def test_stale_index_of_an_excerpt_is_whole_but_named() -> None:
    """test.mzML is an excerpt whose index points past its end: whole (it ends with its root
    tag), and ``index_problem`` says why its index is not used."""
    # reference/README.md: pyteomics' test.mzML keeps the original file's index (offset 5098921).
    path = bf.REFERENCE / "mzml" / "test.mzML"
    assert completeness(path) is None
    reason = index_problem(path)
    assert reason is not None
    assert "indexListOffset 5098921" in reason


def test_format_comes_from_content_not_name(tmp_path: Path) -> None:
    """An mzXML named .mzML, an MGF named .txt and a gzip named .bin are sniffed correctly."""
    assert sniff_format(bf.write(tmp_path, "odd.mzML", bf.MZXML.read_bytes())) == "mzXML"
    assert sniff_format(bf.write(tmp_path, "odd.txt", bf.MGF.read_bytes())) == "MGF"
    assert sniff_format(bf.write(tmp_path, "odd.bin", bf.gz(bf.TINY.read_bytes()))) == "mzML.gz"


def test_bom_comments_and_whitespace_before_root(tmp_path: Path) -> None:
    """A UTF-8 BOM, blank lines and comments before the root do not hide the format."""
    body = bf.PLAIN.read_bytes()
    decl_end = body.index(b"?>") + 2
    data = (
        b"\xef\xbb\xbf\n\n"
        + body[:decl_end]
        + b"\n<!-- exported by Kestrel-2 -->\n"
        + body[decl_end:]
    )
    assert sniff_format(bf.write(tmp_path, "QC_bom.mzML", data)) == "mzML"


def test_gzip_of_mgf_is_refused(tmp_path: Path) -> None:
    """Only mzML may come gzipped; a gzipped MGF is a wrong-format error naming what it holds."""
    with pytest.raises(ReadError) as info:
        sniff_format(bf.write(tmp_path, "S01.mgf.gz", bf.gz(bf.MGF.read_bytes())))
    assert info.value.kind == "wrong-format"
    assert "MGF" in info.value.reason


@pytest.mark.parametrize(
    ("data", "kind"),
    [
        (b"", "empty"),
        (b"  \n\t\n", "empty"),
        (b'<?xml version="1.0"?>', "empty"),
        (b"<?xml version='1.0'?><html><body/></html>", "wrong-format"),
        (b'{"mzQC": {}}', "wrong-format"),
        (b"\x00\x01\x02\x03binary", "wrong-format"),
        (b"PEPMASS=1\nnot a header line\n", "wrong-format"),
    ],
)
def test_sniff_refusals(tmp_path: Path, data: bytes, kind: str) -> None:
    """Non-run content is refused with a machine-readable kind and the file's name."""
    path = bf.write(tmp_path, "QC_x.mzML", data)
    with pytest.raises(ReadError) as info:
        sniff_format(path)
    assert info.value.kind == kind
    assert str(info.value).startswith("QC_x.mzML: unreadable: ")


def test_mgf_header_only_counts_as_mgf(tmp_path: Path) -> None:
    """An MGF with header lines and comments but no spectra yet is still MGF."""
    data = b"# Larkfield Metabolomics Core\nCOM=Kestrel-2 export\nCHARGE=2+\n"
    assert sniff_format(bf.write(tmp_path, "S01_x.mgf", data)) == "MGF"


def test_psims_offset_three_bytes_early_is_accepted(tmp_path: Path) -> None:
    """indexListOffset pointing at whitespace just before <indexList is accepted."""
    # docs/reliability.md item 2: psims 1.4 writes it 3 bytes before <indexList.
    data = bf.reindexed(bf.TINY.read_bytes())
    index_at = data.index(b"<indexList")
    early = index_at - 3
    assert data[early:index_at].isspace()
    data = data.replace(b"<indexListOffset>%d<" % index_at, b"<indexListOffset>%d<" % early)
    path = bf.write(tmp_path, "QC_early.mzML", _resum(data))
    assert completeness(path) is None


def test_offset_not_at_index_list_is_named_not_refused(tmp_path: Path) -> None:
    """indexListOffset that lands inside the body: the file is whole, the index is stale."""
    data = bf.reindexed(bf.TINY.read_bytes())
    index_at = data.index(b"<indexList")
    data = data.replace(b"<indexListOffset>%d<" % index_at, b"<indexListOffset>%d<" % 100)
    path = bf.write(tmp_path, "QC_off.mzML", _resum(data))
    assert completeness(path) is None
    assert index_problem(path) == "indexListOffset 100 does not point at <indexList>"


def test_sha1_covers_bytes_through_the_opening_tag(tmp_path: Path) -> None:
    """The checksum covers everything up to and including <fileChecksum> (mzML 1.1 spec); a
    mismatch is ``checksum_ok`` False, not an incomplete file."""
    data = _resum(bf.reindexed(bf.TINY.read_bytes()))
    ok = bf.write(tmp_path, "QC_ok.mzML", data)
    assert completeness(ok) is None
    assert checksum_ok(ok) is True
    flipped = bf.write(tmp_path, "QC_flip.mzML", data.replace(b"Sample 1", b"Sample 2", 1))
    assert completeness(flipped) is None
    assert checksum_ok(flipped) is False
    # example.mzML's fileChecksum is "MZMLDemoFile", no SHA-1: nothing to compare.
    assert checksum_ok(bf.EXAMPLE) is None


def test_large_file_hash_streams_across_chunks(tmp_path: Path) -> None:
    """A file over several 1 MiB chunks is hashed whole (padding inside the spectrum list)."""
    data = bf.TINY.read_bytes()
    at = data.index(b"<spectrumList")
    padded = bf.reindexed(data[:at] + b" " * (3 * 1024 * 1024 + 17) + data[at:])
    path = bf.write(tmp_path, "QC_big.mzML", padded)
    assert completeness(path) is None
    assert completeness(bf.write(tmp_path, "QC_big.mzML.gz", bf.gz(padded))) is None


def test_gzip_index_is_checked_inside_the_stream(tmp_path: Path) -> None:
    """Inside .gz, a wrong SHA-1 of the inner indexedmzML is ``checksum_ok()`` False; the
    stream is still whole."""
    data = _resum(bf.reindexed(bf.TINY.read_bytes()))
    flipped = data.replace(b"Sample 1", b"Sample 2", 1)
    path = bf.write(tmp_path, "QC_flip.mzML.gz", bf.gz(flipped))
    assert completeness(path) is None
    for inner, expected in ((flipped, False), (data, True)):
        path = bf.write(tmp_path, "QC_gz.mzML.gz", bf.gz(inner))
        with path.open("rb") as raw:
            check = GunzipCheck(raw, "indexedmzML")
            check.drain()
            assert check.problem() is None
            assert check.checksum_ok() is expected


def test_mgf_trailing_blank_lines_are_fine(tmp_path: Path) -> None:
    """Blank lines after the final END IONS do not make an MGF incomplete."""
    path = bf.write(tmp_path, "QC_blank.mgf", bf.MGF.read_bytes() + b"\n\n  \n")
    assert completeness(path) is None


def test_mgf_cut_after_begin_ions(tmp_path: Path) -> None:
    """An MGF cut right after its last BEGIN IONS has unbalanced counts."""
    data = bf.MGF.read_bytes()
    cut = data.rindex(b"BEGIN IONS") + len(b"BEGIN IONS")
    reason = completeness(bf.write(tmp_path, "QC_cut.mgf", data[:cut]))
    assert reason == "MGF has 2 BEGIN IONS but 1 END IONS"


@pytest.mark.parametrize(
    ("name", "data"),
    [
        ("QC_start.mzML", b'<?xml version="1.0"?>\n<indexedmz'),
        ("QC_start.mgf", b"COM=Kestrel-2\nBEGIN IO"),
    ],
)
def test_file_caught_while_starting_to_be_written(tmp_path: Path, name: str, data: bytes) -> None:
    """A file cut inside its root tag or first BEGIN IONS line gets a reason, not a refusal."""
    assert completeness(bf.write(tmp_path, name, data)) is not None


def test_completeness_never_raises_on_foreign_files(tmp_path: Path) -> None:
    """A JPEG named .mzML is not a completeness question: None, and open_run refuses it."""
    path = bf.write(tmp_path, "QC_photo.mzML", b"\xff\xd8\xff\xe0\x00\x10JFIF" + bytes(200))
    assert completeness(path) is None
    with pytest.raises(ReadError) as info:
        sniff_format(path)
    assert info.value.kind == "wrong-format"


def test_file_starting_with_nul_is_still_being_written(tmp_path: Path) -> None:
    """A preallocated file of NUL bytes gets a reason (wait), not a wrong-format refusal."""
    reason = completeness(bf.write(tmp_path, "QC_pre.mzML", b"\x00" * 4096))
    assert reason is not None
    assert "NUL" in reason


def _resum(data: bytes) -> bytes:
    """Rewrite the fileChecksum so it matches the (edited) bytes before it."""
    tag = b"<fileChecksum>"
    cut = data.rindex(tag) + len(tag)
    digest = hashlib.sha1(data[:cut]).hexdigest().encode()  # noqa: S324 - mzML's checksum
    return data[:cut] + digest + data[cut + 40 :]


def _index_list_at(data: bytes, position: int) -> bytes:
    """``data`` (indexedmzML) padded inside the spectrum list so <indexList starts at position."""
    at = data.index(b"<spectrumList")
    pad = position - data.index(b"<indexList")
    return bf.reindexed(data[:at] + b" " * pad + data[at:])


@pytest.mark.parametrize("seam", [-9, -4, -1, 0, 1, 200])
def test_gzip_offset_check_across_decompressed_pieces(tmp_path: Path, seam: int) -> None:
    """<indexList where the one-pass gunzip splits its 1 MiB pieces is still found, exactly."""
    # 1 MiB is formats._OUT_BYTES; the tag is placed so that it straddles that boundary.
    data = _index_list_at(bf.TINY.read_bytes(), (1 << 20) + seam)
    assert data.index(b"<indexList") == (1 << 20) + seam
    assert completeness(bf.write(tmp_path, "QC_seam.mzML.gz", bf.gz(data))) is None
    index_at = data.index(b"<indexList")
    # mzML spec: indexListOffset is the byte offset of <indexList>; 1 byte late is wrong.
    moved = data.replace(
        b"<indexListOffset>%d<" % index_at, b"<indexListOffset>%d<" % (index_at + 1)
    )
    digest = hashlib.sha1(moved[: moved.rindex(b"<fileChecksum>") + 14]).hexdigest()  # noqa: S324
    moved = (
        moved[: moved.rindex(b"<fileChecksum>") + 14]
        + digest.encode()
        + b"</fileChecksum>\n</indexedmzML>\n"
    )
    late = bf.write(tmp_path, "QC_late.mzML.gz", bf.gz(moved))
    assert completeness(late) is None  # whole: the stale offset is a note, not a refusal
    with late.open("rb") as raw:
        check = GunzipCheck(raw, "indexedmzML")
        check.drain()
        reason = check.index_problem()
    assert reason == f"indexListOffset {index_at + 1} does not point at <indexList>"


def test_gzip_offset_may_point_at_whitespace_before_the_tag(tmp_path: Path) -> None:
    """An offset a few bytes early, on whitespace before <indexList, passes inside .gz too."""
    # psims writes the offset at the preceding newline (as the plain-file check allows).
    data = bf.reindexed(bf.TINY.read_bytes())
    index_at = data.index(b"<indexList")
    early = data.replace(
        b"<indexListOffset>%d<" % index_at, b"<indexListOffset>%d<" % (index_at - 1)
    )
    body = early[: early.rindex(b"<fileChecksum>") + 14]
    early = body + hashlib.sha1(body).hexdigest().encode() + b"</fileChecksum>\n</indexedmzML>\n"  # noqa: S324
    assert early[index_at - 1 : index_at] == b" "
    plain = completeness(bf.write(tmp_path, "QC_early.mzML", early))
    assert plain is None
    assert completeness(bf.write(tmp_path, "QC_early.mzML.gz", bf.gz(early))) is None


def test_gzip_bad_crc_and_trailing_garbage_are_reported(tmp_path: Path) -> None:
    """A wrong CRC-32 in the gzip trailer, or junk after the stream, makes the file not whole."""
    # Past the 64 KiB that sniffing gunzips (which alone would call a small file wrong-format):
    # a comment of hex text that does not compress away.
    noise = b"".join(hashlib.sha1(b"%d" % i).hexdigest().encode() for i in range(8000))  # noqa: S324
    data = bf.TINY.read_bytes()
    at = data.index(b"<spectrumList")
    packed = bf.gz(bf.reindexed(data[:at] + b"<!-- " + noise + b" -->" + data[at:]))
    assert len(packed) > 128 * 1024
    # RFC 1952: the trailer is CRC-32 then ISIZE, 4 bytes each, little-endian.
    bad_crc = packed[:-8] + bytes([packed[-8] ^ 0xFF]) + packed[-7:]
    reason = completeness(bf.write(tmp_path, "QC_crc.mzML.gz", bad_crc))
    assert reason is not None
    assert reason.startswith("gzip stream is corrupt")
    junk = completeness(bf.write(tmp_path, "QC_junk.mzML.gz", packed + b"junk"))
    assert junk is not None
    assert junk.startswith("gzip stream is corrupt")
    # RFC 1952 allows several members; zero padding after the last is tolerated as gzip does.
    padded = packed + b"\x00" * 7
    assert completeness(bf.write(tmp_path, "QC_pad.mzML.gz", padded)) is None


def test_bounded_check_reads_no_whole_file(tmp_path: Path) -> None:
    """``deep=False`` (the daemon's settle check) still sees a cut tail, but leaves the MGF
    block count and the gzip stream to the measuring child: each of those needs every byte of
    the file. A wrong index offset is no reason at either depth (the reader streams)."""
    data = _resum(bf.reindexed(bf.TINY.read_bytes()))
    cut_gz = bf.write(tmp_path, "QC_cut.mzML.gz", bf.gz(data)[:-64])
    assert completeness(cut_gz) is not None
    assert completeness(cut_gz, deep=False) is None
    cut = bf.write(tmp_path, "QC_cut.mzML", data[: len(data) // 2])
    assert completeness(cut, deep=False) == completeness(cut)
    index_at = data.index(b"<indexList")
    moved = data.replace(b"<indexListOffset>%d<" % index_at, b"<indexListOffset>100<")
    off = bf.write(tmp_path, "QC_off.mzML", moved)
    assert completeness(off, deep=False) is None
    assert completeness(off) is None


def test_gzip_check_stops_at_max_inflated_bytes(tmp_path: Path) -> None:
    """A gzip stream inflating past ``max_inflated_bytes`` stops there with a 'too large'
    reason (a whole 4 MiB-padded run; the bound is 1 MiB)."""
    data = bf.TINY.read_bytes()
    at = data.index(b"<spectrumList")
    padded = bf.gz(bf.reindexed(data[:at] + b" " * (4 << 20) + data[at:]))
    path = bf.write(tmp_path, "QC_big.mzML.gz", padded)
    assert completeness(path) is None
    reason = completeness(path, max_inflated_bytes=1 << 20)
    assert reason == "too large: gzip content inflates to more than 1 MB (limits.max_inflated_mb)"
