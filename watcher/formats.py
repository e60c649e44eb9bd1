"""Run-file format sniffing and structural completeness, from the bytes alone (no XML parser).

Intake and measure both ask two questions of a file before any spectrum is parsed: what format is
it (decided from content: gzip magic, then the root element or the MGF header lines, never only
the name), and is it whole (tail tag, indexedmzML offset and SHA-1, MGF BEGIN/END balance, full
gzip stream)? Readers hand out intact spectra of a truncated file without complaint, so
completeness is the only proof that a run was copied whole (RELIABILITY.md, item 2).

Imports only ``records``/``errors`` of the project, so intake can use it without pulling in
lxml, numpy or pyteomics.
"""

from __future__ import annotations

import gzip
import hashlib
import os
import re
import zlib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

from watcher.errors import ReadError

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


def completeness(path: Path) -> str | None:
    """None when the file is structurally whole, else a short human reason why it is not.

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
            return _gzip_completeness(path, found.root)
        tail = _read_tail(path, size)
        if found.format == "MGF":
            return _mgf_completeness(path, tail)
        return _xml_completeness(path, found.root, tail, size)
    except ReadError as exc:
        return exc.reason if exc.kind in ("empty", "io") else None
    except OSError as exc:
        return f"cannot read file: {exc.strerror or exc}"


def check_complete(path: Path) -> None:
    """Raise ``ReadError(kind="truncated")`` (``"empty"`` for a zero-byte file) unless whole.

    Files of no known format pass here; ``open_run`` refuses them with ``kind="wrong-format"``.
    """
    reason = completeness(path)
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
        f"{where} is not mzML, mzXML or MGF (starts {_preview(stripped)})",
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
            f"{where} is XML but not mzML or mzXML (root {_preview(text[prolog_end:])})",
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


def _preview(data: bytes) -> str:
    snippet = data[:24].decode("latin-1")
    return repr("".join(ch if ch.isprintable() else "?" for ch in snippet))


# --- completeness ---------------------------------------------------------------------------


def _tail_problem(tail: bytes) -> tuple[bytes, str | None]:
    stripped = tail.rstrip()
    if tail.rstrip(b"\x00 \t\r\n") != stripped or stripped.endswith(b"\x00"):
        return stripped, "NUL bytes at end of file (preallocated, still being written?)"
    return stripped, None


def _xml_completeness(path: Path, root: str | None, tail: bytes, size: int) -> str | None:
    stripped, problem = _tail_problem(tail)
    if problem:
        return problem
    closing = f"</{root}>".encode()
    if not stripped.endswith(closing):
        return f"XML ends before </{root}> (truncated while copying?)"
    if root != "indexedmzML":
        return None
    with path.open("rb") as fh:
        return _index_problem(fh, tail, size)


def _index_problem(fh: BinaryIO, tail: bytes, size: int) -> str | None:
    """indexListOffset must land on <indexList; the SHA-1 must match. ``fh`` is seekable."""
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
    sums = _CHECKSUM_RE.findall(tail)
    if not sums:
        return None  # fileChecksum is optional in practice; the tail tag and offset held
    expected = sums[-1].decode().lower()
    fh.seek(0)
    actual = _sha1_through_tag(_chunks(fh))
    if actual is None:
        return "indexedmzML <fileChecksum> tag not found"
    if actual != expected:
        return "indexedmzML SHA-1 mismatch (file changed or damaged after writing)"
    return None


def _chunks(fh: BinaryIO) -> Iterator[bytes]:
    while chunk := fh.read(_CHUNK_BYTES):
        yield chunk


def _sha1_through_tag(chunks: Iterator[bytes]) -> str | None:
    """SHA-1 over every byte up to and including the last ``<fileChecksum>`` tag.

    The tag is near the end, so all but a held-back tail is hashed as it streams past.
    """
    sha = hashlib.sha1()  # noqa: S324 - the mzML standard fixes SHA-1; not used for security
    held = b""
    for chunk in chunks:
        held += chunk
        if len(held) > 2 * _TAIL_BYTES:
            cut = len(held) - _TAIL_BYTES
            sha.update(held[:cut])
            held = held[cut:]
    pos = held.rfind(_CHECKSUM_TAG)
    if pos < 0:
        return None
    sha.update(held[: pos + len(_CHECKSUM_TAG)])
    return sha.hexdigest()


def _mgf_completeness(path: Path, tail: bytes) -> str | None:
    stripped, problem = _tail_problem(tail)
    if problem:
        return problem
    last_line = stripped.rsplit(b"\n", 1)[-1].strip()
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


def _gzip_completeness(path: Path, root: str | None) -> str | None:
    try:
        with path.open("rb") as raw, gzip.GzipFile(fileobj=raw, mode="rb") as gz:
            inner_size = 0
            tail = b""

            def counted() -> Iterator[bytes]:
                nonlocal inner_size, tail
                for chunk in _chunks(gz):  # type: ignore[arg-type]
                    inner_size += len(chunk)
                    tail = (tail + chunk)[-_TAIL_BYTES:]
                    yield chunk

            digest = _sha1_through_tag(counted())
    except EOFError:
        return "gzip stream ends early (truncated while copying?)"
    except (OSError, zlib.error) as exc:
        return f"gzip stream is corrupt ({_short(exc)})"
    stripped, problem = _tail_problem(tail)
    if problem:
        return problem
    closing = f"</{root}>".encode()
    if not stripped.endswith(closing):
        return f"XML inside gzip ends before </{root}> (truncated before compressing?)"
    if root != "indexedmzML":
        return None
    sums = _CHECKSUM_RE.findall(tail)
    if sums and digest is not None and digest != sums[-1].decode().lower():
        return "indexedmzML SHA-1 mismatch inside gzip"
    # The offset check needs random access into the decompressed stream: a second pass.
    offsets = _INDEX_OFFSET_RE.findall(tail)
    if not offsets:
        return "indexedmzML has no indexListOffset"
    offset = int(offsets[-1])
    if offset >= inner_size:
        return f"indexListOffset {offset} points past the end of the data"
    with path.open("rb") as raw, gzip.GzipFile(fileobj=raw, mode="rb") as gz:
        gz.seek(offset)
        if not gz.read(256).lstrip().startswith(b"<indexList"):
            return f"indexListOffset {offset} does not point at <indexList>"
    return None


def _short(exc: BaseException) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return text.replace(os.sep, "/").rsplit("/", 1)[-1]
