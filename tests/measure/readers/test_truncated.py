"""Broken run files: each is caught by completeness() or open_run with a one-line, named error.

The cases are docs/reliability.md item 2's truncation table (docs/reliability.md), rebuilt here
from the reference files by tests/helpers/badfiles.py.
"""

from __future__ import annotations

import re
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import pytest

from tests.helpers import badfiles as bf
from watcher.errors import ReadError
from watcher.intake.formats import check_complete, completeness
from watcher.measure.readers.read import open_run

Builder = Callable[[Path], Path]


def _cut(source: Path, fraction: float, name: str) -> Builder:
    def build(tmp: Path) -> Path:
        data = source.read_bytes()
        return bf.write(tmp, name, data[: int(len(data) * fraction)])

    return build


def _cut_at(
    source: Path, marker: bytes, name: str, *, occurrence: int = 1, keep: int = 0
) -> Builder:
    def build(tmp: Path) -> Path:
        data = source.read_bytes()
        at = -1
        for _ in range(occurrence):
            at = data.index(marker, at + 1)
        return bf.write(tmp, name, data[: at + keep])

    return build


def _nul_tail(tmp: Path) -> Path:
    data = bf.TINY.read_bytes()
    half = len(data) // 2
    return bf.write(tmp, "QC_prealloc.mzML", data[:half] + b"\x00" * (len(data) - half))


def _bad_base64(tmp: Path) -> Path:
    data = bf.replace_first_binary(bf.TINY.read_bytes(), b"AAAA!!!!AAAA")
    return bf.write(tmp, "QC_b64.mzML", bf.reindexed(data))


def _bad_base64_plain(tmp: Path) -> Path:
    data = bf.replace_first_binary(bf.PLAIN.read_bytes(), b"A" * 7)  # one character short
    return bf.write(tmp, "S01_b64.mzML", data)


def _bad_zlib(tmp: Path) -> Path:
    return bf.write(tmp, "QC_zlib.mzML", bf.bad_zlib(bf.EXAMPLE.read_bytes()))


def _zlib_bomb(tmp: Path) -> Path:
    # 64 MB of zeros in ~64 kB where example.mzML's first spectrum declares 917 values.
    data = bf.with_first_array(bf.EXAMPLE.read_bytes(), bf.deflated_zeros(64 << 20))
    return bf.write(tmp, "QC_bomb.mzML", bf.reindexed(data))


def _bad_zlib_stale(tmp: Path) -> Path:
    return bf.write(tmp, "QC_zlib_stale.mzML", bf.bad_zlib(bf.EXAMPLE.read_bytes(), reindex=False))


def _bad_base64_stale(tmp: Path) -> Path:
    data = bf.TINY.read_bytes()
    start = data.index(b"<binary>") + len(b"<binary>")
    end = data.index(b"</binary>", start)
    # Same length, so the index still fits; the SHA-1 written with the file no longer matches.
    damaged = data[:start] + b"!" * (end - start) + data[end:]
    return bf.write(tmp, "QC_b64_stale.mzML", damaged)


def _odd_length(tmp: Path) -> Path:
    # 3 bytes of base64-valid data in a 64-bit array: not a whole number of values.
    data = bf.replace_first_binary(bf.TINY.read_bytes(), b"AAAA")
    return bf.write(tmp, "QC_odd.mzML", bf.reindexed(data))


def _gz(fraction: float | None, name: str) -> Builder:
    def build(tmp: Path) -> Path:
        packed = bf.gz(bf.EXAMPLE.read_bytes())
        cut = len(packed) - 8 if fraction is None else int(len(packed) * fraction)
        return bf.write(tmp, name, packed[:cut])

    return build


def _mgf_missing_end(tmp: Path) -> Path:
    data = bf.MGF.read_bytes()
    return bf.write(tmp, "QC_mgf_end.mgf", data[: data.rindex(b"END IONS")])


def _mgf_non_numeric(tmp: Path) -> Path:
    data = bf.MGF.read_bytes().replace(b"846.80 44", b"846.80 forty-four", 1)
    return bf.write(tmp, "QC_mgf_peak.mgf", data)


def _static(name: str, data: bytes) -> Builder:
    return lambda tmp: bf.write(tmp, name, data)


JPEG = b"\xff\xd8\xff\xe0\x00\x10JFIF\x00\x01\x01\x00\x00\x01\x00\x01\x00\x00" + bytes(range(256))
GARBAGE = bytes((i * 37 + 11) % 256 for i in range(4096))

# case -> (builder, completeness gives a reason, open_run raises). Not-a-run-file cases get no
# completeness reason on purpose: nothing is gained by waiting, open_run refuses them at once.
CASES: dict[str, tuple[Builder, bool, bool]] = {
    "mzml-cut-50pct": (_cut(bf.TINY, 0.5, "QC_half.mzML"), True, True),
    "mzml-cut-mid-base64": (_cut_at(bf.TINY, b"<binary>", "QC_b64cut.mzML", keep=20), True, True),
    "mzml-cut-after-spectrum": (
        _cut_at(bf.TINY, b"</spectrum>", "QC_after.mzML", occurrence=2, keep=11),
        True,
        True,
    ),
    "mzml-index-footer-missing": (_cut_at(bf.TINY, b"<indexList", "QC_noindex.mzML"), True, False),
    "mzml-nul-tail": (_nul_tail, True, True),
    "mzml-bad-base64": (_bad_base64, False, True),
    "mzml-plain-bad-base64": (_bad_base64_plain, False, True),
    "mzml-corrupt-zlib": (_bad_zlib, False, True),
    "mzml-zlib-bomb": (_zlib_bomb, False, True),
    # example.mzML's fileChecksum is not a SHA-1 ("MZMLDemoFile"): only the parse can tell.
    "mzml-corrupt-zlib-no-sha1": (_bad_zlib_stale, False, True),
    # Whole, so completeness passes; its SHA-1 no longer matches, and the base64 refuses it.
    "mzml-bad-base64-stale-sha1": (_bad_base64_stale, False, True),
    "mzml-array-odd-length": (_odd_length, False, True),
    "empty": (_static("QC_empty.mzML", b""), True, True),
    "xml-declaration-only": (_static("QC_decl.mzML", b'<?xml version="1.0"?>\n'), True, True),
    "jpeg-named-mzml": (_static("QC_photo.mzML", JPEG), False, True),
    "text-named-mzml": (_static("QC_notes.mzML", b"Larkfield run notes\nKestrel-2\n"), False, True),
    "gz-truncated": (_gz(0.5, "QC_half.mzML.gz"), True, True),
    "gz-missing-trailer": (_gz(None, "QC_trailer.mzML.gz"), True, False),
    "mzxml-cut": (_cut(bf.MZXML, 0.5, "QC_half.mzXML"), True, True),
    "mzxml-missing-closing-tags": (_cut_at(bf.MZXML, b"</msRun>", "QC_open.mzXML"), True, True),
    "mgf-missing-end-ions": (_mgf_missing_end, True, True),
    "mgf-non-numeric-peak": (_mgf_non_numeric, False, True),
    "mgf-binary-garbage": (_static("QC_garbage.mgf", GARBAGE), False, True),
}


def _completeness_objects(path: Path) -> bool:
    return completeness(path) is not None


def _read_error(path: Path) -> ReadError | None:
    try:
        with open_run(path) as (_header, scans):
            for _scan in scans:
                pass
    except ReadError as exc:
        return exc
    return None


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_file_is_caught(tmp_path: Path, case: str) -> None:
    """Each broken file is flagged where docs/reliability.md item 2 says it can be, only there."""
    build, incomplete, unreadable = CASES[case]
    path = build(tmp_path)
    assert _completeness_objects(path) is incomplete  # docs/reliability.md item 2 (completeness)
    error = _read_error(path)
    assert (error is not None) is unreadable  # docs/reliability.md item 2 (sequential readers)
    if error is not None:
        message = str(error)
        assert message.startswith(f"{path.name}: unreadable: ")  # STYLE.md section 5
        assert str(tmp_path) not in message
        assert "Traceback" not in message
        assert "\n" not in message


@pytest.mark.parametrize("case", sorted(CASES))
def test_check_complete_raises_a_named_one_line_error(tmp_path: Path, case: str) -> None:
    """check_complete raises ReadError naming only the basename whenever the file is not whole."""
    build, incomplete, _unreadable = CASES[case]
    path = build(tmp_path)
    if not incomplete:
        check_complete(path)
        return
    with pytest.raises(ReadError) as info:
        check_complete(path)
    assert str(info.value).startswith(f"{path.name}: unreadable: ")
    assert str(tmp_path) not in str(info.value)


def test_reasons_say_what_is_wrong(tmp_path: Path) -> None:
    """completeness reasons name the problem (docs/reliability.md item 2 wording)."""
    expected = {
        "mzml-cut-50pct": "XML ends before </indexedmzML>",
        "mzml-nul-tail": "NUL bytes at end of file",
        "gz-truncated": "gzip stream ends early",
        "gz-missing-trailer": "gzip stream ends early",
        "mgf-missing-end-ions": "MGF has 2 BEGIN IONS but 1 END IONS",
        "empty": "file is empty",
        "xml-declaration-only": "only an XML declaration",
        "mzxml-cut": "XML ends before </mzXML>",
    }
    for case, words in expected.items():
        path = CASES[case][0](tmp_path)
        reason = completeness(path)
        assert reason is not None, case
        assert words in reason, (case, reason)


def test_kinds_are_machine_readable(tmp_path: Path) -> None:
    """ReadError.kind tells truncation, corruption, format and emptiness apart."""
    kinds = {
        "mzml-cut-50pct": "truncated",
        "mzml-bad-base64": "corrupt",
        "mzml-corrupt-zlib": "corrupt",
        "empty": "empty",
        "jpeg-named-mzml": "wrong-format",
        "mgf-binary-garbage": "wrong-format",
        "gz-truncated": "truncated",
    }
    for case, kind in kinds.items():
        error = _read_error(CASES[case][0](tmp_path))
        assert error is not None, case
        assert error.kind == kind, (case, error)


def test_pyteomics_error_message_loses_the_absolute_path(tmp_path: Path) -> None:
    """pyteomics puts the absolute path into its MGF error; ours keeps only the basename."""
    error = _read_error(_mgf_non_numeric(tmp_path))
    assert error is not None
    assert str(tmp_path) not in error.reason  # docs/reliability.md item 2: PyteomicsError has it
    assert "QC_mgf_peak.mgf" in str(error)


def test_unclosed_mgf_spectrum_is_named(tmp_path: Path) -> None:
    """An MGF whose last block lacks END IONS is reported as such, not as a parser crash."""
    error = _read_error(_mgf_missing_end(tmp_path))
    assert error is not None
    assert "spectrum 2 has no END IONS" in error.reason  # test.mgf holds 2 spectra


@pytest.mark.timeout(60)  # a hang guard (speed is measured in bench/)
def test_stale_index_with_junk_streams(tmp_path: Path) -> None:
    """A 160 KB no-whitespace run inside a spectrum, stale index: read by streaming."""
    # docs/reliability.md item 1: pyteomics' byte indexer needs >120 s on this input.
    data = bf.TINY.read_bytes()
    at = data.index(b"<spectrum ")
    close = data.index(b">", at) + 1
    path = bf.write(tmp_path, "QC_dos.mzML", data[:close] + b"A" * 160_000 + data[close:])
    with open_run(path) as (_header, scans):
        assert len(list(scans)) == 4  # files.tsv: tiny.pwiz has 4 spectra


def test_bogus_offsets_fall_back_to_streaming(tmp_path: Path) -> None:
    """An index whose first offset misses <spectrum by one byte still gives every spectrum."""
    data = bf.reindexed(bf.TINY.read_bytes())
    index_at = data.index(b"<indexList")
    head, index = data[:index_at], data[index_at:]
    found = re.search(rb"<offset [^>]*>(\d+)</offset>", index)
    assert found is not None
    bumped = str(int(found.group(1)) + 1).encode()
    index = index[: found.start(1)] + bumped + index[found.end(1) :]
    path = bf.write(tmp_path, "QC_offsets.mzML", head + index)
    with open_run(path) as (_header, scans):
        assert [s.ms_level for s in scans] == [1, 2, 1, 1]  # spectra.tsv ms_level


def test_zlib_bomb_is_refused_without_inflating_it(tmp_path: Path) -> None:
    """A 1 GB zlib bomb in a 917-value array is refused under a 200 MB address-space margin.

    Run in a child whose RLIMIT_AS is its own size plus 200 MB: inflating the bomb in full
    would raise MemoryError there; the declared length stops it at 7 336 bytes instead.
    """
    data = bf.with_first_array(bf.EXAMPLE.read_bytes(), bf.deflated_zeros(1 << 30))
    path = bf.write(tmp_path, "QC_bomb_1g.mzML", bf.reindexed(data))
    script = (
        "import resource, re, sys\n"
        "from pathlib import Path\n"
        "from watcher.errors import ReadError\n"
        "from watcher.measure.readers.read import open_run\n"
        "size = int(re.search(r'VmSize:\\s+(\\d+)', open('/proc/self/status').read())[1]) * 1024\n"
        "resource.setrlimit(resource.RLIMIT_AS, (size + (200 << 20), resource.RLIM_INFINITY))\n"
        "try:\n"
        "    with open_run(Path(sys.argv[1])) as (_h, scans):\n"
        "        for _ in scans: pass\n"
        "except ReadError as exc:\n"
        "    print(exc)\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", script, str(path)], capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 0, proc.stderr[-800:]
    assert "QC_bomb_1g.mzML: unreadable" in proc.stdout
    assert "inflates past the 7336 bytes declared" in proc.stdout  # 917 x 8-byte m/z
