"""Open a run file of any supported format and stream its scans; every failure is a ReadError.

``open_run`` sniffs the format from content, refuses XML with a DOCTYPE before any streaming
parser sees it, picks the fastest safe path (index-guided for indexedmzML whose index checks
out, sequential otherwise) and turns every parser, codec and I/O error into one ReadError line
that names the file and no other path. It does not check completeness: the caller does that
first (``watcher.intake.formats.check_complete``), because readers yield intact spectra of a
cut file --
except, on request, for the gzip stream of a .mzML.gz, which is proven whole in the same
decompressing pass as the parse (``watcher.intake.formats.GunzipCheck``) instead of in a second one.
"""

from __future__ import annotations

import binascii
import gzip
import io
import os
import re
import time
import zlib
from collections.abc import Callable, Iterator
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass
from typing import IO, TYPE_CHECKING, Any

from lxml import etree  # type: ignore[import-untyped, unused-ignore]

from watcher.errors import ReadError
from watcher.intake import formats
from watcher.intake.formats import GunzipCheck, sniff
from watcher.measure.readers import mzml, mzml_chrom, safexml
from watcher.measure.readers import mzml_index as mzmlindex
from watcher.measure.readers.cv import disable_remote
from watcher.measure.scan import RunHeader, Scan

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.measure.chromatogram import Chromatogram

Progress = Callable[[int, int], None]


@dataclass(frozen=True, slots=True)
class ChromatogramWish:
    """Which chromatograms of an mzML run the caller wants, and where they go.

    ``add`` is called with each chromatogram, in file order, after the last spectrum and before
    the scans iterator ends. ``with_spectra``: also when the run has spectra (the config has
    transitions); otherwise only for a run without spectra (a targeted, chromatogram-only run),
    so a spectrum run's reading costs what it did.
    """

    add: Callable[[Chromatogram], None]
    with_spectra: bool = False


STALE_INDEX_NOTE = "index offsets are stale; read without the index"
_PROGRESS_INTERVAL_S = 0.05  # at most ~20 progress calls per second
_PATH_RE = re.compile(r"(?:[A-Za-z]:)?(?:[\\/][^\s'\"\\/:]+)+[\\/]([^\s'\"\\/:]+)")


@contextmanager
def open_run(
    path: Path,
    *,
    ms1_arrays: bool = True,
    progress: Progress | None = None,
    check_gzip: bool = False,
    max_inflated_bytes: int | None = None,
    chromatograms: ChromatogramWish | None = None,
) -> Iterator[tuple[RunHeader, Iterator[Scan]]]:
    """Open ``path`` and yield ``(header, scans)``; scans come one at a time in file order.

    Args:
        path: the run file (mzML, mzML.gz, mzXML or MGF; decided from content).
        ms1_arrays: decode m/z and intensity arrays (float64, m/z ascending) of MS1 scans.
            MS2 arrays are never decoded.
        progress: called as ``progress(done, total)`` in bytes, at most ~20 times a second.
        check_gzip: for mzML.gz, check the whole gzip stream (CRC-32, end of stream, closing
            tag, index offset and SHA-1 inside) while parsing; after the last scan, ``scans``
            raises ``ReadError(kind="truncated")`` if it is not whole. Pair it with
            ``check_complete(path, whole_gzip=False)`` before the call. When the parse fails
            on such a stream, the rest of the same stream is drained and its problem, if any,
            is the error (the file is inflated once, never a second time to name the reason).
        max_inflated_bytes: with ``check_gzip``, the most a .mzML.gz may inflate to; past it
            the error is ``kind="too-large"``.
        chromatograms: read the chromatograms of an mzML run (ChromatogramWish); other
            formats have none.

    Raises:
        ReadError: from opening and from iterating ``scans``; the message names the file's
            basename only, one line, no traceback.
    """
    throttle = _Throttle(progress, _size(path))
    with ExitStack() as stack:
        try:
            header, scans = _open(
                path,
                stack,
                ms1_arrays=ms1_arrays,
                throttle=throttle,
                check_gzip=check_gzip,
                max_inflated_bytes=max_inflated_bytes,
                wish=chromatograms,
            )
        except (ReadError, MemoryError):
            raise  # out of memory is the limit's doing, not the file's: the caller reports it
        except Exception as exc:
            raise _as_read_error(path, exc) from None
        yield header, _guarded(path, scans, throttle)


def _open(
    path: Path,
    stack: ExitStack,
    *,
    ms1_arrays: bool,
    throttle: _Throttle,
    check_gzip: bool,
    max_inflated_bytes: int | None,
    wish: ChromatogramWish | None,
) -> tuple[RunHeader, Iterator[Scan]]:
    found = sniff(path)
    if found.format == "MGF":
        text = stack.enter_context(
            io.TextIOWrapper(
                io.BufferedReader(_Counted(stack.enter_context(path.open("rb")), throttle)),
                encoding="utf-8",
                errors="strict",
            )
        )
        # The MGF and mzXML readers load pyteomics' XML stack (and psims, when installed: half
        # a second); imported on their own paths only, so an mzML run does not pay for them.
        from watcher.measure.readers import mgf

        disable_remote()  # pyteomics may consult the PSI-MS CV: never over the network
        return RunHeader(format="MGF"), mgf.read_scans(text)
    if found.format == "mzML.gz":
        with gzip.open(path, "rb") as probe:
            safexml.assert_no_doctype(probe, name=path.name)
        raw = stack.enter_context(path.open("rb"))
        if check_gzip:
            check = GunzipCheck(
                _Counted(raw, throttle),  # type: ignore[arg-type]
                found.root,
                max_inflated_bytes=max_inflated_bytes,
            )
            events = safexml.safe_iterparse(check, events=("start", "end"), tag=mzml.stream_tags())
            try:
                pre = mzml.read_preamble(events)
            except Exception:
                _raise_stream_problem(path, check)
                raise
            header = _mzml_header(found.format, pre)
            scans = _streamed(events, pre, want_arrays=ms1_arrays, wish=wish)
            return header, _then_whole(path, scans, check, header)
        gz = gzip.GzipFile(fileobj=_Counted(raw, throttle))
        stack.callback(gz.close)
        source: IO[bytes] = gz  # type: ignore[assignment]
    else:
        safexml.assert_no_doctype(path)
        source = _Counted(stack.enter_context(path.open("rb")), throttle)  # type: ignore[assignment]
    if found.format == "mzXML":
        from watcher.measure.readers import mzxml

        disable_remote()  # pyteomics may consult the PSI-MS CV: never over the network
        return RunHeader(format="mzXML"), mzxml.read_scans(source, want_arrays=ms1_arrays)
    events = safexml.safe_iterparse(source, events=("start", "end"), tag=mzml.stream_tags())
    pre = mzml.read_preamble(events)
    header = _mzml_header(found.format, pre)
    if found.format == "mzML" and found.root == "indexedmzML":
        header.checksum_ok = formats.checksum_ok(path)
        stale = formats.index_problem(path)
        if stale is not None:
            # Patched, CRLF-converted or merged files: whole, but their offsets point elsewhere.
            header.notes.append(f"{STALE_INDEX_NOTE} ({stale})")
            return header, _streamed(events, pre, want_arrays=ms1_arrays, wish=wish)
        fd = os.open(path, os.O_RDONLY)
        stack.callback(os.close, fd)
        index = mzmlindex.load_offset_index(fd, os.fstat(fd).st_size)
        if index is not None:
            scans = mzmlindex.indexed_scans(
                fd,
                index,
                pre,
                want_arrays=ms1_arrays,
                parse=safexml.parse_fragment,
                on_offset=throttle.at,
            )
            return header, _with_fallback(
                path,
                scans,
                stack,
                header,
                ms1_arrays=ms1_arrays,
                wish=wish,
                fd=fd,
                index=index,
                pre=pre,
            )
        if _indexes_spectra(fd, os.fstat(fd).st_size):
            # Offsets given but refused on loading (not ascending, past the index, spectra
            # after the last one): a patched or merged file.
            header.notes.append(f"{STALE_INDEX_NOTE} (spectrum offsets do not fit the file)")
    return header, _streamed(events, pre, want_arrays=ms1_arrays, wish=wish)


_SPECTRUM_INDEX_RE = re.compile(rb'<index\s+name="spectrum"\s*>\s*<offset\s')
_TAIL_OFFSET_RE = re.compile(rb"<indexListOffset>\s*(\d+)\s*</indexListOffset>")


def _indexes_spectra(fd: int, size: int) -> bool:
    """Whether the file's offset index lists any spectrum (an empty one doubts nothing)."""
    found = _TAIL_OFFSET_RE.findall(os.pread(fd, 4096, max(0, size - 4096)))
    if not found or not 0 < int(found[-1]) < size:
        return False
    at = int(found[-1])
    return _SPECTRUM_INDEX_RE.search(os.pread(fd, min(size - at, 1 << 16), at)) is not None


def _mzml_header(fmt: str, pre: mzml.Preamble) -> RunHeader:
    return RunHeader(
        format=fmt, acquired_at_iso=pre.start_time_stamp, n_spectra_declared=pre.spectrum_count
    )


def _streamed(
    events: Iterator[tuple[str, Any]],
    pre: mzml.Preamble,
    *,
    want_arrays: bool,
    wish: ChromatogramWish | None,
    skip: int = 0,
    seen: int = 0,
) -> Iterator[Scan]:
    """Streamed scans, then (as wished) the chromatograms from the same events.

    ``seen`` spectra were already yielded by another path (the index, before a doubt).
    """
    for scan in mzml.stream_scans(events, pre, want_arrays=want_arrays, skip=skip):
        seen += 1
        yield scan
    if wish is not None and (wish.with_spectra or seen == 0):
        for chromatogram in mzml_chrom.stream_chromatograms(events, pre.groups):
            wish.add(chromatogram)


def _with_fallback(
    path: Path,
    scans: Iterator[Scan],
    stack: ExitStack,
    header: RunHeader,
    *,
    ms1_arrays: bool,
    wish: ChromatogramWish | None,
    fd: int,
    index: mzmlindex.OffsetIndex,
    pre: mzml.Preamble,
) -> Iterator[Scan]:
    """Index-guided scans; if the index turns out wrong midway, stream the rest sequentially.

    Chromatograms (as wished) come from the ``<chromatogramList>`` bytes alone after indexed
    spectra, or from the same stream after a fallback.
    """
    seen = 0
    try:
        for scan in scans:
            seen += 1
            yield scan
    except mzmlindex.IndexDoubt as doubt:
        header.notes.append(
            f"{STALE_INDEX_NOTE} (spectrum {doubt.position} is not at its indexed offset)"
        )
        source = stack.enter_context(path.open("rb"))
        events = safexml.safe_iterparse(source, events=("start", "end"), tag=mzml.stream_tags())
        pre = mzml.read_preamble(events)
        yield from _streamed(
            events, pre, want_arrays=ms1_arrays, wish=wish, skip=doubt.position, seen=seen
        )
        return
    if wish is None or not (wish.with_spectra or seen == 0):
        return
    region = mzml_chrom.chromatogram_region(
        fd, os.fstat(fd).st_size, index.starts[-1], index.ends[-1]
    )
    if region is None:
        return
    try:
        found = list(
            mzml_chrom.stream_chromatograms(mzml_chrom.region_events(fd, *region), pre.groups)
        )
    except etree.XMLSyntaxError:
        # The list alone is not well-formed XML (a namespace prefix declared on the root, say):
        # the whole file's stream reads it in context, as for a plain mzML.
        source = stack.enter_context(path.open("rb"))
        events = safexml.safe_iterparse(source, events=("start", "end"), tag=mzml.stream_tags())
        pre = mzml.read_preamble(events)
        for _skipped in mzml.stream_scans(events, pre, want_arrays=False, skip=1 << 62):
            pass
        found = list(mzml_chrom.stream_chromatograms(events, pre.groups))
    for chromatogram in found:
        wish.add(chromatogram)


def _then_whole(
    path: Path, scans: Iterator[Scan], check: GunzipCheck, header: RunHeader
) -> Iterator[Scan]:
    """The scans, then the rest of the gzip stream checked: a cut stream ends in a ReadError.

    A whole stream then gives the inner file's checksum verdict and index note to ``header``
    (a .mzML.gz is always streamed: its stale index costs nothing, but is said all the same).
    """
    try:
        yield from scans
    except (GeneratorExit, MemoryError):
        raise
    except Exception:
        # A cut, corrupt or too large stream makes the parse fail anywhere: its problem is the
        # reason, as the full completeness check would name it, from the same single pass.
        _raise_stream_problem(path, check)
        raise
    _raise_stream_problem(path, check)
    header.checksum_ok = check.checksum_ok()
    stale = check.index_problem()
    if stale is not None:
        header.notes.append(f"{STALE_INDEX_NOTE} ({stale})")


def _raise_stream_problem(path: Path, check: GunzipCheck) -> None:
    """Drain the rest of the gzip stream; raise its problem, if it has one, as the ReadError."""
    check.drain()
    reason = check.problem()
    if reason is not None:
        raise ReadError(path, reason, kind="too-large" if check.too_large else "truncated")


def _guarded(path: Path, scans: Iterator[Scan], throttle: _Throttle) -> Iterator[Scan]:
    """Re-raise anything the readers throw as one ReadError; report progress at the end."""
    try:
        yield from scans
    except (ReadError, GeneratorExit, MemoryError):
        raise  # a MemoryError means the memory limit, not a corrupt file (childmeasure says so)
    except Exception as exc:
        raise _as_read_error(path, exc) from None
    throttle.done()


def _as_read_error(path: Path, exc: BaseException) -> ReadError:
    kind = "corrupt"
    if isinstance(exc, etree.XMLSyntaxError):
        what = "XML is not well-formed"
        if "Premature end" in str(exc) or "EndTag" in str(exc) or "end of data" in str(exc):
            kind = "truncated"
    elif isinstance(exc, mzml.UnsupportedCompression):
        what, kind = "unsupported data", "unsupported"
    elif isinstance(exc, mzml_chrom.ChromatogramError):
        what = "bad chromatogram data"
    elif isinstance(exc, mzml.SpectrumError):
        what = "bad spectrum data"
    elif isinstance(exc, EOFError):
        what, kind = "file ends early", "truncated"
    elif isinstance(exc, zlib.error | gzip.BadGzipFile):
        what = "corrupt compressed data"
    elif isinstance(exc, binascii.Error):
        what = "invalid base64"
    elif isinstance(exc, UnicodeDecodeError):
        what = "not text in the expected encoding"
    elif isinstance(exc, OSError):
        what, kind = "cannot read file", "io"
    else:  # ValueError, PyteomicsError, KeyError, ... from the parsers
        what = "cannot parse"
    return ReadError(path, f"{what}: {_one_line(exc, path)}", kind=kind)


def _one_line(exc: BaseException, path: Path) -> str:
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    text = text.replace(str(path), path.name).replace(str(path.resolve()), path.name)
    return _PATH_RE.sub(r"\1", text)[:300]


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


class _Throttle:
    """Calls ``progress(done, total)`` at most every 50 ms, and once at the end."""

    def __init__(self, progress: Progress | None, total: int) -> None:
        self._progress = progress
        self._total = total
        self._last_s = 0.0

    def at(self, done: int) -> None:
        if self._progress is None:
            return
        now_s = time.monotonic()
        if now_s - self._last_s >= _PROGRESS_INTERVAL_S:
            self._last_s = now_s
            self._progress(min(done, self._total), self._total)

    def done(self) -> None:
        if self._progress is not None:
            self._progress(self._total, self._total)


class _Counted(io.RawIOBase):
    """A read-only byte stream that reports how far into the underlying file it has read."""

    def __init__(self, raw: IO[bytes], throttle: _Throttle) -> None:
        super().__init__()
        self._raw = raw
        self._throttle = throttle

    def readable(self) -> bool:
        return True

    def readinto(self, buffer: Any) -> int:
        data = self._raw.read(len(buffer))
        n = len(data)
        buffer[:n] = data
        self._throttle.at(self._raw.tell())
        return n

    def read(self, size: int = -1) -> bytes:
        data = self._raw.read(size)
        self._throttle.at(self._raw.tell())
        return data

    def seekable(self) -> bool:
        return True  # pyteomics' mzXML and MGF readers rewind once at the start

    def seek(self, offset: int, whence: int = io.SEEK_SET) -> int:
        return self._raw.seek(offset, whence)

    def tell(self) -> int:
        return self._raw.tell()
