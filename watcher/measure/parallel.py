"""Measure one indexed mzML run in several processes: contiguous blocks of spectra, one process
each, their traces joined in file order, so the metrics equal one pass's exactly.

Decoding MS1 arrays is CPU-bound and the GIL keeps it on one core; a large run on a machine with
cores to spare is read in ``workers`` blocks instead (watcher/measure/readers/mzml_blocks.py).
Each block returns its ``RunTraces`` (per-scan calibrant errors, XIC points, TIC; a few MB for
the largest runs), joined with ``RunTraces.extend``; the metrics are computed once, from the
joined traces. Any doubt or failure in any block (an index that does not check out, a damaged
spectrum, a worker killed) returns None and the caller reads the file in one pass, which gives
the canonical result or error. Blocks are forked (no re-import: the start-up costs nothing) and
die with their parent (PR_SET_PDEATHSIG), so a measuring child killed for its time limit takes
its blocks with it.
"""

from __future__ import annotations

import contextlib
import os
import signal
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from collections.abc import Callable
    from pathlib import Path

    from watcher.config import Config
    from watcher.measure.run import RunTraces
    from watcher.measure.scan import RunHeader
    from watcher.records import RunMetrics

# The readers, the traces and the process pool (multiprocessing, concurrent.futures: about 15 ms)
# are imported where blocks are read, not on import: the daemon's main process asks
# ``worker_count`` and never reads a run itself, and a small run never forks.
MAX_AUTO_WORKERS = 4
MIN_SPECTRA_PER_BLOCK = 16  # fewer spectra per block: the processes cost more than they save
# Below this size one pass is faster than forking and joining (a few tens of ms of overhead).
MIN_PARALLEL_BYTES = 32 * 1024 * 1024
_PR_SET_PDEATHSIG = 1  # <linux/prctl.h>


def worker_count(configured: int) -> int:
    """``limits.workers``: 0 means the cores this process may run on, at most 4."""
    if configured > 0:
        return configured
    try:
        cores = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cores = os.cpu_count() or 1
    return max(1, min(MAX_AUTO_WORKERS, cores))


def measure_in_blocks(
    path: Path,
    config: Config,
    *,
    workers: int,
    progress: Callable[[int, int], None] | None = None,
    min_bytes: int = MIN_PARALLEL_BYTES,
    min_spectra_per_block: int = MIN_SPECTRA_PER_BLOCK,
) -> RunMetrics | None:
    """The run's metrics read in ``workers`` processes, or None when the file is not one for
    it (not an uncompressed indexedmzML, smaller than ``min_bytes``, too few spectra) or any
    block failed; the caller then reads it in one pass."""
    try:
        size = path.stat().st_size
    except OSError:
        return None
    if workers < 2 or size < min_bytes:
        return None
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    from watcher.measure.readers import mzml_blocks

    bounds = mzml_blocks.block_bounds(path, workers, min_spectra_per_block=min_spectra_per_block)
    if bounds is None:
        return None
    needs_arrays = bool(config.calibrants or config.expected_ions)
    context = multiprocessing.get_context("fork")
    results: list[tuple[RunHeader, RunTraces]] = []
    try:
        with ProcessPoolExecutor(
            max_workers=len(bounds), mp_context=context, initializer=_die_with_parent
        ) as pool:
            futures = [
                pool.submit(_measure_block, path, first, stop, config, needs_arrays)
                for first, stop in bounds
            ]
            for done, future in enumerate(futures, start=1):
                results.append(future.result())
                if progress is not None:
                    progress(size * done // len(futures), size)
    except MemoryError:
        raise
    except Exception:
        return None  # one pass names the problem, or measures what a block doubted
    header, joined = results[0]
    for _, traces in results[1:]:
        joined.extend(traces)
    spectra = len(joined.signal.ms1_rt_s) + joined.signal.ms2_count
    if joined.damaged and joined.damaged == spectra:
        return None  # nothing readable: one pass words the error
    from watcher.intake import formats

    header.checksum_ok = formats.checksum_ok(path)  # as the one-pass reader sets it
    return joined.metrics(header, config, file_name=path.name)


def _measure_block(
    path: Path, first: int, stop: int, config: Config, needs_arrays: bool
) -> tuple[RunHeader, RunTraces]:
    from watcher.measure.readers import mzml_blocks
    from watcher.measure.run import RunTraces

    traces = RunTraces(config)
    with mzml_blocks.open_block(path, first, stop, ms1_arrays=needs_arrays) as (header, scans):
        for scan in scans:
            traces.add(scan)
    return header, traces


def _die_with_parent() -> None:
    """Ask the kernel to SIGKILL this block when the process that forked it dies."""
    import ctypes

    with contextlib.suppress(OSError, AttributeError):
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to handle
