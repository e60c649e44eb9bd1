"""Run-file format sniffing and structural completeness, from the bytes alone (no XML parser).

Intake and measure both ask two questions of a file before any spectrum is parsed: what format is
it (decided from content: gzip magic, then the root element or the MGF header lines, never only
the name), and is it whole (tail tag, MGF BEGIN/END balance, full gzip stream)? The indexedmzML
offset and SHA-1 are asked separately (``index_problem``, ``checksum_ok``): a whole file whose
index is stale is read without it, and its checksum is a metric, not a refusal. Readers hand
out intact spectra of a truncated file without complaint, so completeness is the only proof
that a run was copied whole (docs/reliability.md, item 2).

Imports only ``records``/``errors`` of the project, so intake can use it without pulling in
lxml, numpy or pyteomics.
"""

from __future__ import annotations

import hashlib
import os
import re
import zlib
from dataclasses import dataclass
from typing import IO, TYPE_CHECKING, Any, BinaryIO

from watcher.errors import ReadError

if TYPE_CHECKING:
    from collections.abc import Iterator
    from pathlib import Path

FORMATS = ("mzML", "mzML.gz", "mzXML", "MGF")

_CHUNK_BYTES = 1 << 20  # SHA-1 and gunzip stream in 1 MiB chunks: files reach 2 GB
_HEAD_BYTES = 64 * 1024  # enough for any real prolog; attack prologs are refused before the root
_TAIL_BYTES = 64 * 1024  # indexListOffset and fileChecksum sit in the last few hundred bytes
_GZIP_MAGIC = b"\x1f\x8b"
_UTF8_BOM = b"\xef\xbb\xbf"

_ROOT_RE = re.compile(rb"<(?:[A-Za-z_][\w.-]*:)?(indexedmzML|mzML|mzXML)[\s/>]")
_MGF_HEADER_RE = re.compile(r"^[A-Za-z][A-Za-z0-9_]*\s*=")
_MGF_COMMENT_PREFIXES = ("#", ";", "!", "/")
_INDEX_OFFSET_RE = re.compile(rb"<indexListOffset>\s*(\d+)\s*</indexListOffset>")
_CHECKSUM_RE = re.compile(rb"<fileChecksum>\s*([0-9A-Fa-f]{40})\s*</fileChecksum>")
_CHECKSUM_TAG = b"<fileChecksum>"


@dataclass(frozen=True, slots=True)
class Sniffed:
    """What the first bytes say: the format and, for XML, the root element's local name."""

    format: str  # one of FORMATS
    root: str | None  # "indexedmzML", "mzML", "mzXML"; None for MGF


def sniff_format(path: Path) -> str:
    """Return ``"mzML"``, ``"mzML.gz"``, ``"mzXML"`` or ``"MGF"``, decided from the file's content.

    Raises:
        ReadError: ``kind="empty"`` (no bytes, only whitespace, or only an XML declaration),
            ``kind="wrong-format"`` (not a run file), ``kind="xml-doctype"`` (a DOCTYPE in the
            prolog: real mzML/mzXML never carry one, and it is how entity attacks start),
            ``kind="io"`` (cannot be opened).
    """
    return sniff(path).format


def sniff(path: Path) -> Sniffed:
    """Like ``sniff_format`` but also returns the XML root name (indexedmzML vs mzML)."""
    head = _read_head(path)
    if head[:2] == _GZIP_MAGIC:
        inner = _gunzip_head(path, head)
        found = _sniff_plain(path, inner, gz=True)
        if found.format != "mzML":
            raise ReadError(
                path, f"gzip file holds {found.format}, only mzML.gz is read", kind="wrong-format"
            )
        return Sniffed("mzML.gz", found.root)
    return _sniff_plain(path, head, gz=False)


def completeness(
    path: Path,
    *,
    whole_gzip: bool = True,
    deep: bool = True,
    max_inflated_bytes: int | None = None,
) -> str | None:
    """None when the file is structurally whole, else a short human reason why it is not.

    With ``whole_gzip=False`` a .gz file gets only the cheap checks here (size, head, format):
    the caller proves the stream whole while reading it (``GunzipCheck``). With ``deep=False``
    (the daemon's settle check, on its main loop) every check reads a bounded number of bytes
    whatever the file's size: head and tail; no MGF block count, no
    gzip stream. The measuring child does those once, with its time and memory limits, so that
    a 20 GiB sparse file or a gzip bomb never holds up the loop that pings systemd's watchdog.
    ``max_inflated_bytes`` bounds the gzip stream (``GunzipCheck``).

    Never raises. A file that can never become a run file (wrong format, a DOCTYPE) is not a
    completeness question: the answer is None and ``open_run`` refuses it at once, rather than
    intake waiting for it. Empty files, files that start with NUL bytes and files cut before
    their root element get a reason: they may still be being written.
    """
    try:
        size = path.stat().st_size
        if size == 0:
            return "file is empty (still being written?)"
        head = _read_head(path)
        if head[:1] == b"\x00":
            return "file starts with NUL bytes (preallocated, still being written?)"
        found = sniff(path)
        if found.format == "mzML.gz":
            if not (whole_gzip and deep):
                return None
            return _gzip_completeness(path, found.root, max_inflated_bytes)
        tail = _read_tail(path, size)
        if found.format == "MGF":
            return _mgf_completeness(path, tail, deep=deep)
        return _xml_completeness(found.root, tail)
    except ReadError as exc:
        return exc.reason if exc.kind in ("empty", "io") else None
    except OSError as exc:
        return f"cannot read file: {exc.strerror or exc}"


def check_complete(path: Path, *, whole_gzip: bool = True) -> None:
    """Raise ``ReadError(kind="truncated")`` (``"empty"`` for a zero-byte file) unless whole.

    Files of no known format pass here; ``open_run`` refuses them with ``kind="wrong-format"``.
    ``whole_gzip`` as in ``completeness``.
    """
    reason = completeness(path, whole_gzip=whole_gzip)
    if reason is not None:
        kind = "empty" if reason.startswith("file is empty") else "truncated"
        raise ReadError(path, reason, kind=kind)


# --- sniffing -------------------------------------------------------------------------------


def _read_head(path: Path) -> bytes:
    try:
        with path.open("rb") as fh:
            return fh.read(_HEAD_BYTES)
    except OSError as exc:
        raise ReadError(path, f"cannot read file: {exc.strerror or exc}", kind="io") from exc


def _read_tail(path: Path, size: int) -> bytes:
    with path.open("rb") as fh:
        fh.seek(max(0, size - _TAIL_BYTES))
        return fh.read()


def _gunzip_head(path: Path, head: bytes) -> bytes:
    # Only the first 64 KiB of compressed bytes: enough for the inner prolog, cheap on 2 GB files.
    try:
        return zlib.decompressobj(wbits=31).decompress(head, _HEAD_BYTES)
    except zlib.error as exc:
        raise ReadError(path, f"gzip data is corrupt ({exc})", kind="wrong-format") from exc


def _sniff_plain(path: Path, head: bytes, *, gz: bool) -> Sniffed:
    text = head[len(_UTF8_BOM) :] if head.startswith(_UTF8_BOM) else head
    stripped = text.lstrip()
    where = "gzip content" if gz else "file"
    if not stripped:
        raise ReadError(path, f"{where} is empty or blank", kind="empty")
    if stripped[:1] == b"<":
        return _sniff_xml(path, stripped, where)
    if b"\x00" in stripped:
        raise ReadError(path, f"{where} is binary, not a run file", kind="wrong-format")
    if _looks_like_mgf(stripped):
        return Sniffed("MGF", None)
    raise ReadError(
        path,
        f"{where} is not a run file ({_size_text(path)}; not mzML, mzXML or MGF)",
        kind="wrong-format",
    )


def _sniff_xml(path: Path, text: bytes, where: str) -> Sniffed:
    prolog_end = _prolog_end(text)
    if text.startswith(b"<!", prolog_end):
        raise ReadError(
            path,
            "XML DOCTYPE/entity declarations are not allowed in run files",
            kind="xml-doctype",
        )
    if prolog_end >= len(text):
        if len(text) < _HEAD_BYTES:
            raise ReadError(
                path, f"{where} holds only an XML declaration, no root element", kind="empty"
            )
        raise ReadError(path, f"{where}: no root element in the first 64 KiB", kind="wrong-format")
    match = _ROOT_RE.match(text, prolog_end)
    rest = text[prolog_end:]
    if match is None and len(text) < _HEAD_BYTES and _is_root_prefix(rest):
        raise ReadError(path, f"{where} ends inside the root start tag", kind="empty")
    if match is None:
        raise ReadError(
            path,
            f"{where} is not a run file ({_size_text(path)}; XML, but not mzML or mzXML)",
            kind="wrong-format",
        )
    root = match.group(1).decode()
    return Sniffed("mzXML" if root == "mzXML" else "mzML", root)


def _is_root_prefix(rest: bytes) -> bool:
    # "<indexedmz" with nothing after it: a file caught in the first moments of being written.
    return any(name.startswith(rest) for name in (b"<indexedmzML", b"<mzML", b"<mzXML"))


def _prolog_end(text: bytes) -> int:
    """Offset of the root start tag: skips the declaration, PIs, comments and whitespace.

    A DOCTYPE (any ``<!`` other than a comment) stops the scan where it starts.
    """
    pos = 0
    n = len(text)
    while pos < n:
        while pos < n and text[pos : pos + 1].isspace():
            pos += 1
        if text.startswith(b"<?", pos):
            end = text.find(b"?>", pos)
            if end < 0:
                return n
            pos = end + 2
        elif text.startswith(b"<!--", pos):
            end = text.find(b"-->", pos)
            if end < 0:
                return n
            pos = end + 3
        else:
            return pos  # the root start tag, or "<!" of a DOCTYPE (which the caller refuses)
    return n


def _looks_like_mgf(text: bytes) -> bool:
    try:
        decoded = text.decode("utf-8", errors="strict")
    except UnicodeDecodeError as exc:
        if exc.start < len(text) - 4:  # a multi-byte character cut at the 64 KiB boundary is fine
            return False
        decoded = text[: exc.start].decode("utf-8")
    lines = decoded.splitlines()
    if lines and not decoded.endswith("\n") and "BEGIN IONS".startswith(lines[-1].strip().upper()):
        lines.pop()  # a last line still being written ("BEGIN IO") says nothing either way
    for line in lines:
        stripped = line.strip()
        if not stripped or stripped.startswith(_MGF_COMMENT_PREFIXES):
            continue
        if stripped.upper() == "BEGIN IONS":
            return True
        if not _MGF_HEADER_RE.match(stripped):
            return False
    return True  # only header lines so far: an MGF header longer than 64 KiB, or no spectra


def _size_text(path: Path) -> str:
    # The size, never the bytes: a wrong file may be a secret (a link to a credentials file),
    # and this reason goes into alerts and the health log.
    try:
        return f"{path.stat().st_size} bytes"
    except OSError:
        return "size unknown"


# --- completeness ---------------------------------------------------------------------------


def _tail_problem(tail: bytes) -> tuple[bytes, str | None]:
    stripped = tail.rstrip()
    if tail.rstrip(b"\x00 \t\r\n") != stripped or stripped.endswith(b"\x00"):
        return stripped, "NUL bytes at end of file (preallocated, still being written?)"
    return stripped, None


def _xml_completeness(root: str | None, tail: bytes) -> str | None:
    stripped, problem = _tail_problem(tail)
    if problem:
        return problem
    closing = f"</{root}>".encode()
    if not stripped.endswith(closing):
        return f"XML ends before </{root}> (truncated while copying?)"
    # The index and the fileChecksum are not completeness questions: a file that ends with its
    # closing root tag is whole even when a tool patched it afterwards, a transfer turned LF
    # into CRLF (every offset moves) or files were merged. Its index is only a shortcut
    # (``index_problem``; the reader then streams) and its checksum a metric (``checksum_ok``).
    return None


def index_problem(path: Path) -> str | None:
    """Why a plain indexedmzML's ``indexListOffset`` cannot be trusted, or None when it lands.

    Bounded reads only (the tail and 256 bytes at the offset). A file of another root, or a
    .gz, has no index to doubt here: None.
    """
    try:
        size = path.stat().st_size
        if sniff(path).root != "indexedmzML" or _read_head(path)[:2] == _GZIP_MAGIC:
            return None
        tail = _read_tail(path, size)
        with path.open("rb") as fh:
            return _offset_problem(fh, tail, size)
    except (OSError, ReadError):
        return None  # the reader names what is wrong with such a file


def _offset_problem(fh: BinaryIO, tail: bytes, size: int) -> str | None:
    """indexListOffset must land on <indexList. ``fh`` is seekable."""
    offsets = _INDEX_OFFSET_RE.findall(tail)
    if not offsets:
        return "indexedmzML has no indexListOffset"
    offset = int(offsets[-1])
    if offset >= size:
        return f"indexListOffset {offset} points past the end of the file"
    fh.seek(offset)
    # psims writes the offset a few bytes early, at the preceding newline: allow whitespace.
    if not fh.read(256).lstrip().startswith(b"<indexList"):
        return f"indexListOffset {offset} does not point at <indexList>"
    return None


def checksum_ok(path: Path) -> bool | None:
    """Whether a plain indexedmzML's SHA-1 ``fileChecksum`` matches its bytes; None when the
    file carries none (or no 40-digit hex one), is not indexedmzML, or is a .gz (the gzip pass
    answers for those: ``GunzipCheck.checksum_ok``).

    mzML 1.1 (indexedmzML schema): the SHA-1 covers every byte up to and including the
    ``<fileChecksum>`` tag. Reads the whole file once, in 4 MiB chunks.

    Raises:
        OSError: the file cannot be read.
    """
    size = path.stat().st_size
    try:
        if sniff(path).root != "indexedmzML" or _read_head(path)[:2] == _GZIP_MAGIC:
            return None
    except ReadError:
        return None
    tail = _read_tail(path, size)
    sums = _CHECKSUM_RE.findall(tail)
    if not sums:
        return None
    expected = sums[-1].decode().lower()
    tag_at = tail.rfind(_CHECKSUM_TAG)  # the last tag of the file lies in its tail
    with path.open("rb") as fh:
        actual = _sha1_of_prefix(fh, size - len(tail) + tag_at + len(_CHECKSUM_TAG))
    return bool(actual == expected)


def _sha1_of_prefix(fh: BinaryIO, length: int) -> str:
    """SHA-1 of the first ``length`` bytes, read into one reused buffer (no copies per chunk)."""
    sha = hashlib.sha1()  # noqa: S324 - the mzML standard fixes SHA-1; not used for security
    buffer = bytearray(_CHUNK_BYTES * 4)
    view = memoryview(buffer)
    left = length
    while left > 0:
        n = fh.readinto(view[: min(left, len(buffer))])  # type: ignore[attr-defined]
        if not n:
            break  # the file shrank under us: the digest will not match
        sha.update(view[:n])
        left -= n
    return sha.hexdigest()


def _chunks(fh: BinaryIO) -> Iterator[bytes]:
    while chunk := fh.read(_CHUNK_BYTES):
        yield chunk


def _mgf_completeness(path: Path, tail: bytes, *, deep: bool = True) -> str | None:
    stripped, problem = _tail_problem(tail)
    if problem:
        return problem
    last_line = stripped.rsplit(b"\n", 1)[-1].strip()
    if deep:
        begins, ends = _count_mgf_blocks(path)
        if begins != ends:
            return f"MGF has {begins} BEGIN IONS but {ends} END IONS"
    if last_line.upper() != b"END IONS":
        return "MGF does not end with END IONS (truncated while copying?)"
    return None


def _count_mgf_blocks(path: Path) -> tuple[int, int]:
    begins = ends = 0
    carry = b""
    with path.open("rb") as fh:
        for chunk in _chunks(fh):
            data = (carry + chunk).upper()
            # Count only whole lines; the last partial line waits for the next chunk.
            cut = data.rfind(b"\n") + 1
            whole, carry = data[:cut], (carry + chunk)[cut:]
            begins += _count_lines(whole, b"BEGIN IONS")
            ends += _count_lines(whole, b"END IONS")
    tail = carry.upper()
    begins += _count_lines(tail + b"\n", b"BEGIN IONS")
    ends += _count_lines(tail + b"\n", b"END IONS")
    return begins, ends


def _count_lines(block: bytes, word: bytes) -> int:
    return sum(1 for line in block.split(b"\n") if line.strip() == word) if word in block else 0


def _gzip_completeness(path: Path, root: str | None, max_inflated_bytes: int | None) -> str | None:
    with path.open("rb") as raw:
        check = GunzipCheck(raw, root, max_inflated_bytes=max_inflated_bytes)
        check.drain()
        return check.problem()


_IN_BYTES = 256 * 1024  # compressed bytes per read
_OUT_BYTES = 1 << 20  # at most this much decompressed at a time: a gzip bomb stays bounded
_OFFSET_SLACK = 256  # indexListOffset may point up to this far before <indexList (whitespace)
_MAX_MARKS = 64
_INDEX_LIST_TAG = b"<indexList"
_ASCII_SPACE = b" \t\n\r\x0b\x0c"  # what bytes.lstrip() strips
_SLACK_SPACES = _OFFSET_SLACK - len(_INDEX_LIST_TAG)  # the tag must fit in the 256 bytes read


class GunzipCheck:
    """Decompress a gzip stream once, for a parser and for the completeness proof at the same time.

    ``read(n)`` hands out the decompressed bytes; alongside, every byte is hashed (SHA-1 up to
    the last ``<fileChecksum>``), the last 64 KiB are kept for the closing tag and the index
    offset, and the positions of ``<indexList`` are noted so the offset can be checked without
    seeking back. The gzip trailer (CRC-32 and length) is checked by zlib at each member's end.
    After the parser is done, ``drain()`` reads whatever it left, and ``problem()`` gives the
    same reasons as ``completeness`` (None when whole). A truncated or corrupt stream ends
    ``read`` early (the parser then fails) and is reported by ``problem()``.

    ``max_inflated_bytes`` bounds the decompressed size: past it the stream ends there,
    ``too_large`` is set and ``problem()`` says so. A 21 MB gzip bomb inflates to 21.5 GB of
    zeros; without a bound, checking it costs about a minute of CPU and tells nothing more.
    """

    def __init__(
        self, raw: IO[bytes], root: str | None, *, max_inflated_bytes: int | None = None
    ) -> None:
        self._raw = raw
        self._root = root
        self._max_inflated_bytes = max_inflated_bytes
        self.too_large = False
        self._inflate: Any = zlib.decompressobj(wbits=31)
        self._in = b""  # compressed input not yet consumed
        self._between = False  # at the end of a member (zero padding or another member may follow)
        self._done = False
        self._problem: str | None = None
        self._out = b""  # decompressed bytes not yet handed to the reader
        self._out_at = 0
        self._sha = hashlib.sha1()  # noqa: S324 - the mzML standard fixes SHA-1
        self._held = b""  # the last <= 64 KiB, not hashed yet (the checksum tag may be in it)
        self._size = 0
        self._marks: list[tuple[int, int]] = []  # (whitespace start, position) of "<indexList"
        self._marks_overflow = False
        self._prev = b""  # the last bytes of the previous output, for tags across chunks

    def readable(self) -> bool:
        return True

    def read(self, size: int = -1) -> bytes:
        """Up to ``size`` decompressed bytes (b"" at the end, or when the stream is bad)."""
        if self._out_at >= len(self._out):
            self._out, self._out_at = self._next(), 0
        if size < 0:
            size = len(self._out)
        piece = self._out[self._out_at : self._out_at + size]
        self._out_at += len(piece)
        return piece

    def drain(self) -> None:
        """Decompress (and check) everything the reader has not asked for."""
        self._out, self._out_at = b"", 0
        while self._next():
            pass

    def problem(self) -> str | None:
        """Why the stream is not a whole run file, or None; call after ``drain``."""
        if self._problem is not None:
            return self._problem
        tail = self._held
        stripped, problem = _tail_problem(tail)
        if problem:
            return problem
        root = self._root
        if not stripped.endswith(f"</{root}>".encode()):
            return f"XML inside gzip ends before </{root}> (truncated before compressing?)"
        return None  # the index and the checksum are not completeness questions (see below)

    def checksum_ok(self) -> bool | None:
        """Whether the inner indexedmzML's SHA-1 fileChecksum matches (None: it has none);
        call after ``drain``."""
        tail = self._held
        if self._root != "indexedmzML" or self._problem is not None:
            return None
        sums = _CHECKSUM_RE.findall(tail)
        if not sums:
            return None
        sha = self._sha.copy()
        sha.update(tail[: tail.rfind(_CHECKSUM_TAG) + len(_CHECKSUM_TAG)])
        return bool(sha.hexdigest() == sums[-1].decode().lower())

    def index_problem(self) -> str | None:
        """Why the inner indexedmzML's indexListOffset cannot be trusted, or None when it
        lands on ``<indexList`` (the .gz reader streams either way); call after ``drain``."""
        tail = self._held
        if self._root != "indexedmzML" or self._problem is not None:
            return None
        offsets = _INDEX_OFFSET_RE.findall(tail)
        if not offsets:
            return "indexedmzML has no indexListOffset"
        offset = int(offsets[-1])
        if offset >= self._size:
            return f"indexListOffset {offset} points past the end of the data"
        if self._marks_overflow:
            return "indexedmzML has too many <indexList tags to check its offset"
        if not any(start <= offset <= at for start, at in self._marks):
            return f"indexListOffset {offset} does not point at <indexList>"
        return None

    def _next(self) -> bytes:
        """The next non-empty piece of decompressed data, b"" at the end or on a bad stream."""
        while not self._done:
            if not self._in:
                self._in = self._raw.read(_IN_BYTES)
                if not self._in:
                    self._done = True
                    if not self._between:
                        self._problem = "gzip stream ends early (truncated while copying?)"
                    break
            if self._between:
                self._in = self._in.lstrip(b"\x00")  # zero padding after a member is allowed
                if not self._in:
                    continue
                self._inflate, self._between = zlib.decompressobj(wbits=31), False
            try:
                out: bytes = self._inflate.decompress(self._in, _OUT_BYTES)
            except zlib.error as exc:
                self._done = True
                self._problem = f"gzip stream is corrupt ({_short(exc)})"
                break
            if self._inflate.eof:
                self._in, self._between = self._inflate.unused_data, True
            else:
                self._in = self._inflate.unconsumed_tail
            if out:
                cap = self._max_inflated_bytes
                if cap is not None and self._size + len(out) > cap:
                    self._done = self.too_large = True
                    self._problem = (
                        f"too large: gzip content inflates to more than {cap // (1024 * 1024)} "
                        "MB (limits.max_inflated_mb)"
                    )
                    break
                self._account(out)
                return out
        return b""

    def _account(self, out: bytes) -> None:
        self._note_marks(out)
        self._size += len(out)
        if len(out) >= _TAIL_BYTES:
            self._sha.update(self._held)
            self._sha.update(memoryview(out)[: len(out) - _TAIL_BYTES])
            self._held = out[-_TAIL_BYTES:]
        else:
            joined = self._held + out
            cut = max(0, len(joined) - _TAIL_BYTES)
            self._sha.update(memoryview(joined)[:cut])
            self._held = joined[cut:]

    def _note_marks(self, out: bytes) -> None:
        # A tag may straddle two pieces: search the seam (the previous bytes + this piece's
        # start) and then the rest of this piece, each start position exactly once.
        keep = _OFFSET_SLACK + len(_INDEX_LIST_TAG)
        prev = self._prev
        seam = prev + out[: keep + len(_INDEX_LIST_TAG)]
        first = max(0, len(prev) - len(_INDEX_LIST_TAG) + 1)
        self._find_marks(seam, self._size - len(prev), first, len(prev) + keep)
        self._find_marks(out, self._size, keep, len(out))
        self._prev = (prev + out[-keep:])[-keep:]

    def _find_marks(self, data: bytes, base: int, begin: int, stop: int) -> None:
        at = data.find(_INDEX_LIST_TAG, begin)
        while 0 <= at < stop:
            start = at  # whitespace before the tag: where the offset may point
            while start > 0 and at - start < _SLACK_SPACES and data[start - 1] in _ASCII_SPACE:
                start -= 1
            mark = (base + start, base + at)
            if mark not in self._marks:
                if len(self._marks) >= _MAX_MARKS:
                    self._marks_overflow = True
                    return
                self._marks.append(mark)
            at = data.find(_INDEX_LIST_TAG, at + 1)


def _short(exc: BaseException) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return text.replace(os.sep, "/").rsplit("/", 1)[-1]
