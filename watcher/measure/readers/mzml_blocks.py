"""Contiguous blocks of an indexed mzML's spectra, for reading one run in several processes.

``block_bounds`` cuts the spectra into ranges of about equal bytes (where the decoding work is:
MS1 arrays dominate, and their bytes are what the index spans); ``open_block`` reads one range
in a process of its own, with the same checks as the whole-file index reader (DOCTYPE refused,
every offset landing on the spectrum it names, spectra numbered as in one pass). Anything in
doubt (no index, an index that does not check out, a gzip or non-indexed file) gives None or an
error, and the caller reads the file in one pass instead.
"""

from __future__ import annotations

import bisect
import os
from contextlib import ExitStack, contextmanager
from typing import TYPE_CHECKING

from watcher.errors import ReadError
from watcher.intake import formats
from watcher.intake.formats import sniff
from watcher.measure.readers import mzml, safexml
from watcher.measure.readers import mzml_index as mzmlindex
from watcher.measure.scan import RunHeader

if TYPE_CHECKING:
    from collections.abc import Iterator
    from pathlib import Path

    from watcher.measure.scan import Scan

MIN_SPECTRA_PER_BLOCK = 16  # fewer: the processes cost more than they save


def block_bounds(
    path: Path, blocks: int, *, min_spectra_per_block: int = MIN_SPECTRA_PER_BLOCK
) -> list[tuple[int, int]] | None:
    """``blocks`` ranges ``(first, stop)`` of spectrum positions covering the whole run in
    order, about equal in bytes; None unless ``path`` is an uncompressed indexedmzML whose index
    checks out and holds enough spectra for two blocks at least."""
    if blocks < 2:
        return None
    try:
        found = sniff(path)
        if found.format != "mzML" or found.root != "indexedmzML":
            return None
        if formats.index_problem(path) is not None:
            return None  # stale offsets: the one-pass reader streams it, with its note
        fd = os.open(path, os.O_RDONLY)
        try:
            index = mzmlindex.load_offset_index(fd, os.fstat(fd).st_size)
        finally:
            os.close(fd)
    except (OSError, ReadError):
        return None
    if index is None:
        return None
    n = len(index.starts)
    blocks = min(blocks, n // max(1, min_spectra_per_block))
    if blocks < 2:
        return None
    first_byte, total = index.starts[0], index.ends[-1] - index.starts[0]
    bounds: list[tuple[int, int]] = []
    first = 0
    for k in range(1, blocks):
        cut = bisect.bisect_left(index.starts, first_byte + total * k // blocks)
        cut = min(max(cut, first + 1), n - (blocks - k))  # every block holds a spectrum
        bounds.append((first, cut))
        first = cut
    bounds.append((first, n))
    return bounds


@contextmanager
def open_block(
    path: Path, first: int, stop: int, *, ms1_arrays: bool
) -> Iterator[tuple[RunHeader, Iterator[Scan]]]:
    """The spectra at positions ``first <= i < stop`` of an indexed mzML, with the run header.

    Raises:
        ReadError: the file has a DOCTYPE, or its index no longer checks out.
        mzml_index.IndexDoubt, mzml.SpectrumError, lxml errors: from iterating the scans (the
            caller reads the file in one pass instead, which names the problem).
    """
    with ExitStack() as stack:
        safexml.assert_no_doctype(path)
        source = stack.enter_context(path.open("rb"))
        events = safexml.safe_iterparse(source, events=("start", "end"), tag=mzml.stream_tags())
        pre = mzml.read_preamble(events)
        fd = os.open(path, os.O_RDONLY)
        stack.callback(os.close, fd)
        index = mzmlindex.load_offset_index(fd, os.fstat(fd).st_size)
        if index is None or stop > len(index.starts):
            raise ReadError(path, "the offset index changed while reading", kind="corrupt")
        scans = mzmlindex.indexed_scans(
            fd,
            index,
            pre,
            want_arrays=ms1_arrays,
            parse=safexml.parse_fragment,
            first=first,
            stop=stop,
        )
        header = RunHeader(
            format="mzML",
            acquired_at_iso=pre.start_time_stamp,
            n_spectra_declared=pre.spectrum_count,
        )
        yield header, scans
