"""Index-guided reading of indexedmzML: byte offsets from the file's own index, MS2 never decoded.

The offset index at the end of the file gives each spectrum's position. Its shape is checked on
loading (offsets ascending, every entry readable, nothing after the last one; any doubt returns
None so the caller streams instead). Whether each offset lands on the ``<spectrum`` it names,
with ``index="i"`` counting 0, 1, 2 ... so nothing is left out, is checked on the bytes the reader
reads anyway; a miss raises IndexDoubt and the caller streams from that spectrum on. Headers are
read with ``os.pread`` (most straight from the bytes, the rest parsed as XML fragments); only MS1
spectra are read whole. This is
docs/performance.md's method h; never pyteomics' byte indexer (docs/reliability.md, item 1).
"""

from __future__ import annotations

import os
import re
from array import array
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from watcher.measure.readers import mzml
from watcher.measure.readers.mzml_header import fast_header, light_header

if TYPE_CHECKING:
    from collections.abc import Iterator

    from watcher.measure.scan import Scan

_MS_LEVEL_RE = re.compile(rb'accession="MS:1000511"[^>]*?value="(\d+)"')
_INDEX_OFFSET_RE = re.compile(rb"<indexListOffset>\s*(\d+)\s*</indexListOffset>")
_ID_RE = re.compile(rb'\sid="([^"]*)"')
_INDEX_ATTR_RE = re.compile(rb'\sindex="(\d+)"')
_INDEX_BLOCK_RE = re.compile(rb'<index\s+name="([^"]*)"\s*>(.*?)</index>', re.S)
_OFFSET_ENTRY_RE = re.compile(rb"<offset\s([^>]*)>\s*(\d+)\s*</offset>")
_ID_REF_RE = re.compile(rb'\bidRef="([^"]*)"')
_USUAL_START_RE = re.compile(rb'<spectrum index="(\d+)" id="([^"<>]*)"[\s/>]')
_HEAD_BYTES = 512  # the spectrum start tag and its first cvParams (ms level) fit in this
_HEADER_BYTES = 4096  # a typical spectrum header, up to <binaryDataArrayList>
_MAX_INDEX_BYTES = 256 * 1024 * 1024


@dataclass(frozen=True, slots=True)
class OffsetIndex:
    """Byte ranges and ids of the spectra from the file's own index (shape checked, not landing)."""

    # 64-bit integer arrays, not tuples of ints: 8 bytes per spectrum instead of ~40.
    starts: array[int]
    ends: array[int]  # exclusive bound for each spectrum's bytes (next element's offset)
    # Every idRef as written (escaped) in one blob, spectrum i's at id_ends[i-1]:id_ends[i]:
    # 40 000 bytes objects would cost ~2 MB of headers on top of the text.
    ids: bytes
    id_ends: array[int]

    def id_ref(self, position: int) -> bytes:
        """The idRef the index gives for spectrum ``position``, as written in the file."""
        return self.ids[self.id_ends[position - 1] if position else 0 : self.id_ends[position]]


def load_offset_index(fd: int, size: int) -> OffsetIndex | None:
    """Read the embedded offset index and check its shape; None on any doubt (then stream).

    Offsets must ascend, every entry must parse and carry an idRef, and the last spectrum must
    close the ``<spectrumList>``. Where each offset lands is checked later, by
    ``indexed_scans`` on the bytes it reads anyway (one read per spectrum, not two).

    Args:
        fd: an open file descriptor of a plain (not compressed) indexedmzML file.
        size: its size in bytes.
    """
    tail = os.pread(fd, 4096, max(0, size - 4096))
    offsets = _INDEX_OFFSET_RE.findall(tail)
    if not offsets:
        return None
    index_at = int(offsets[-1])
    if not 0 < index_at < size or size - index_at > _MAX_INDEX_BYTES:
        return None
    block = os.pread(fd, size - index_at, index_at)
    end = block.find(b"</indexList>")
    if end < 0:
        return None
    # Regular expressions walked one match at a time, never a tree or a list of every entry:
    # 40 000 offsets as lxml elements cost ~15 MB, as lists of tuples ~10 MB.
    starts: array[int] = array("q")
    others: array[int] = array("q", [index_at])
    ids = bytearray()
    id_ends: array[int] = array("q")
    blocks = 0
    for found_block in _INDEX_BLOCK_RE.finditer(block, 0, end):
        blocks += 1
        name, body_at, body_end = found_block.group(1), found_block.start(2), found_block.end(2)
        entries = 0
        for entry in _OFFSET_ENTRY_RE.finditer(block, body_at, body_end):
            entries += 1
            value = int(entry.group(2))
            if name != b"spectrum":
                others.append(value)
                continue
            if (starts and value <= starts[-1]) or value >= index_at:
                return None
            ref_match = _ID_REF_RE.search(entry.group(1))
            if ref_match is None:
                return None  # nothing to check the landing against
            # No read here: indexed_scans checks the landing on the header bytes it reads.
            ids += ref_match.group(1)
            id_ends.append(len(ids))
            starts.append(value)
        if entries != block.count(b"<offset", body_at, body_end):
            return None  # an entry we cannot read: doubt
    if blocks != block.count(b"<index ", 0, end):
        return None
    del block
    if not starts:
        return None  # an empty spectrum index proves nothing: stream and see
    bounds = sorted(set(others))
    ends: array[int] = array("q", starts[1:])
    ends.append(next((b for b in bounds if b > starts[-1]), index_at))
    if not _ends_spectrum_list(os.pread(fd, ends[-1] - starts[-1], starts[-1])):
        return None  # spectra after the last indexed one: the index is not the whole story
    return OffsetIndex(starts, ends, bytes(ids), id_ends)


def _lands_on_spectrum(head: bytes, position: int, id_ref: bytes) -> bool:
    """``head`` (bytes read at an indexed offset) opens ``<spectrum`` with this id and index."""
    # The usual start tag (index then id, as the index writes the idRef) is one match; any
    # other form, or a mismatch, gets the full check below.
    usual = _USUAL_START_RE.match(head)
    if usual is not None and usual.group(2) == id_ref and int(usual.group(1)) == position:
        return True
    if not head.startswith(b"<spectrum") or head[9:10] not in (b" ", b"\t", b"\n", b"\r"):
        return False
    close = head.find(b">")
    stop = close + 1 if close >= 0 else len(head)
    found = _ID_RE.search(head, 0, stop)
    if found is None:
        return False
    written = found.group(1)
    if written != id_ref and _unescape(written) != _unescape(id_ref):
        return False
    # index="i" must count 0, 1, 2 ...: a spectrum left out of the index would break it.
    number = _INDEX_ATTR_RE.search(head, 0, stop)
    return number is not None and int(number.group(1)) == position


def _ends_spectrum_list(last: bytes) -> bool:
    cut = last.rfind(b"</spectrum>")
    if last.count(b"<spectrum ") != 1 or last.count(b"</spectrum>") != 1:
        return False
    return last[cut + len(b"</spectrum>") :].lstrip().startswith(b"</spectrumList>")


def _unescape(value: bytes) -> bytes:
    return (
        value.replace(b"&quot;", b'"')
        .replace(b"&apos;", b"'")
        .replace(b"&lt;", b"<")
        .replace(b"&gt;", b">")
        .replace(b"&amp;", b"&")
    )


def indexed_scans(
    fd: int,
    index: OffsetIndex,
    pre: mzml.Preamble,
    *,
    want_arrays: bool,
    parse: Any,
    on_offset: Any = None,
    first: int = 0,
    stop: int | None = None,
) -> Iterator[Scan]:
    """One Scan per indexed spectrum: header bytes for all, whole elements only for MS1 arrays.

    ``first`` and ``stop`` restrict it to the spectra at positions ``first <= i < stop`` (one
    block of the parallel reader); each is checked and numbered as in a whole pass.

    Raises:
        IndexDoubt: spectrum ``position`` is not where the index says (before it is yielded;
            the spectra already yielded were checked the same way).
    """
    stop = len(index.starts) if stop is None else stop
    for i in range(first, stop):
        start, end = index.starts[i], index.ends[i]
        if on_offset is not None:
            on_offset(start)
        # One read serves the landing check, the ms level and, for most spectra, the header.
        head = os.pread(fd, min(_HEADER_BYTES, end - start), start)
        if not _lands_on_spectrum(head, i, index.id_ref(i)):
            raise IndexDoubt(i)  # offset off its <spectrum>, or a spectrum left out
        match = _MS_LEVEL_RE.search(head, 0, _HEAD_BYTES)
        level = int(match.group(1)) if match else None
        if level == 1 and want_arrays:
            data = _whole_element(os.pread(fd, end - start, start), i)
            yield _ms1_with_arrays(data, i, pre, parse)
            continue
        data, cut = head, head.find(b"<binaryDataArrayList")
        if cut < 0:  # a long header, or no arrays: read on
            data, cut = _header_bytes(fd, start, end, i, head)
        # MS2 and up: only the fields the metrics read (scan.NON_MS1_FIELDS).
        scan = (
            light_header(data, i, level, end=cut) if level is not None and level != 1 else None
        ) or fast_header(data, i, end=cut)
        needs_arrays = False
        if scan is None:
            fragment = data[:cut] + b"</spectrum>" if cut >= 0 else data
            scan, needs_arrays = mzml.scan_from_element(
                parse(fragment), index=i, groups=pre.groups, want_arrays=want_arrays
            )
        elif want_arrays and scan.ms_level == 1:
            needs_arrays = True
        if needs_arrays:  # ms level came from a param group or late in the header: MS1 after all
            data = _whole_element(os.pread(fd, end - start, start), i)
            scan = _ms1_with_arrays(data, i, pre, parse)
        yield scan


def _ms1_with_arrays(data: bytes, i: int, pre: mzml.Preamble, parse: Any) -> Scan:
    cut = data.find(b"<binaryDataArrayList")
    scan = fast_header(data, i, end=cut) if cut >= 0 else None
    if scan is None:
        scan, _ = mzml.scan_from_element(parse(data), index=i, groups=pre.groups, want_arrays=True)
        return scan
    close = data.rfind(b"</binaryDataArrayList>")
    if close < cut:
        raise mzml.SpectrumError(f"spectrum {i}: <binaryDataArrayList> is not closed")
    length_match = _LENGTH_RE.search(data, 0, data.find(b">") + 1)
    length = int(length_match.group(1)) if length_match else 0
    where = f"spectrum {i} ({_spectrum_id(data)})"
    parts = plain_arrays(data, cut, close)
    if parts is not None:
        try:
            mzml.decode_plain_arrays(parts, scan, where, length)
            return scan
        except mzml.SpectrumError:
            pass  # the XML path below decides, and words the error
    arrays = parse(data[cut : close + len(b"</binaryDataArrayList>")])
    mzml.decode_arrays(arrays, scan, pre.groups, where, length)
    return scan


_ARRAY_START_RE = re.compile(rb"<binaryDataArray(?:\s[^<>]*)?>")
_ARRAY_LENGTH_RE = re.compile(rb'\sarrayLength="(\d+)"')
_ARRAY_PARAMS_RE = re.compile(rb"(?:\s*<cvParam\s[^<>&]*/>)*\s*")
_PARAM_ACCESSION_RE = re.compile(rb'<cvParam\s[^<>]*?\baccession="([^"]*)"')
_ARRAY_END = b"</binaryDataArray>"
_ENCODED_LENGTH_RE = re.compile(rb'\sencodedLength="(\d+)"')


def _binary_end(data: bytes, start_tag: bytes, text_at: int, close: int) -> int:
    """Where ``</binary>`` is: at the declared encodedLength if it says so, else searched.

    A wrong encodedLength that happens to land on ``</binary>`` leaves ``<`` in the text,
    which strict base64 refuses; the XML parse then decides.
    """
    declared = _ENCODED_LENGTH_RE.search(start_tag)
    if declared is not None:
        at = text_at + int(declared.group(1))
        if data.startswith(b"</binary>", at) and at < close:
            return at
    return data.find(b"</binary>", text_at, close)


def plain_arrays(data: bytes, cut: int, close: int) -> list[mzml.ArrayPart] | None:
    """The arrays of ``data[cut:close]`` (a ``<binaryDataArrayList>`` body) cut from the bytes.

    Only the plain layout: each ``<binaryDataArray>`` holds cvParams (no param groups, no
    entities) then ``<binary>``, and nothing else sits between them. None otherwise: the XML
    parse handles every form. Saves building a tree and copying each array's text three times.
    """
    pos = data.find(b">", cut, close) + 1
    if pos <= 0:
        return None
    parts: list[mzml.ArrayPart] = []
    while True:
        at = data.find(b"<", pos, close + 1)
        if at < 0 or data[pos:at].strip():
            return None
        if at == close:
            return parts
        start = _ARRAY_START_RE.match(data, at)
        if start is None:
            return None
        opened = data.find(b"<binary>", start.end(), close)
        if opened < 0 or _ARRAY_PARAMS_RE.fullmatch(data, start.end(), opened) is None:
            return None
        shut = _binary_end(data, start.group(0), opened + len(b"<binary>"), close)
        end = data.find(_ARRAY_END, shut, close) if shut >= 0 else -1
        if end < 0 or data[shut + len(b"</binary>") : end].strip():
            return None
        accessions = tuple(
            a.decode("ascii", "replace")
            for a in _PARAM_ACCESSION_RE.findall(data, start.end(), opened)
        )
        length = _ARRAY_LENGTH_RE.search(start.group(0))
        text = data[opened + len(b"<binary>") : shut]
        parts.append((accessions, int(length.group(1)) if length else None, text))
        pos = end + len(_ARRAY_END)


_LENGTH_RE = re.compile(rb'\sdefaultArrayLength="(\d+)"')


def _spectrum_id(data: bytes) -> str:
    found = _ID_RE.search(data, 0, data.find(b">") + 1)
    return found.group(1).decode("utf-8", "replace") if found else "?"


class IndexDoubt(Exception):
    """The offset index disagrees with the bytes at spectrum ``position``: stream from there."""

    def __init__(self, position: int) -> None:
        super().__init__(position)
        self.position = position


def _whole_element(data: bytes, i: int) -> bytes:
    cut = data.rfind(b"</spectrum>")
    if cut < 0 or data.count(b"</spectrum>") != 1:
        raise IndexDoubt(i)  # not exactly one spectrum between two offsets
    end = cut + len(b"</spectrum>")
    # Only whitespace after the element (the usual case): keep the bytes, skip a copy.
    return data if not data[end:].strip() else data[:end]


def _header_bytes(fd: int, start: int, end: int, i: int, head: bytes) -> tuple[bytes, int]:
    """Bytes from ``start`` holding the header, and where ``<binaryDataArrayList`` starts.

    ``head`` is what was already read at ``start``; more is read only when it ends too soon.
    The position is -1 when the bytes are the whole element (a spectrum without arrays).
    """
    data = head
    want = _HEADER_BYTES
    while True:
        cut = data.find(b"<binaryDataArrayList")
        if cut >= 0:
            return data, cut
        if len(data) >= end - start:
            return _whole_element(data, i), -1
        want *= 4
        data = os.pread(fd, min(want, end - start), start)
