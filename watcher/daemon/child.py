"""Entry point of the measuring child process: run files in, RunMetrics or ReadError out.

Run as ``python -m watcher.daemon.child``. The child imports the readers once, writes one ready
byte, then serves requests until stdin closes. Each request is a length-prefixed pickle of
``(config, path, memory_mb)``; before measuring, the child lowers its soft address-space limit
(RLIMIT_AS) to ``memory_mb``, and it answers with a length-prefixed pickle of
``("ok", metrics)`` or ``("error", kind, reason)``. Both ends are this package, so pickle
carries the frozen records as they are. After running out of memory the child answers and
exits, because a MemoryError can leave the interpreter in a poor state.
"""

from __future__ import annotations

import ctypes
import os
import pickle
import resource
import signal
import struct
import sys
from pathlib import Path
from typing import Any, BinaryIO

_PR_SET_PDEATHSIG = 1
READY = b"R"
HEADER = struct.Struct(">Q")


def _die_with_parent() -> None:
    # A kill -9 of the daemon must not leave an orphan measuring a 2 GB file for minutes.
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0)
    except (OSError, AttributeError):
        return
    if os.getppid() == 1:
        os._exit(1)


def _limit_memory(memory_mb: int) -> None:
    limit = memory_mb * 1024 * 1024
    _, hard = resource.getrlimit(resource.RLIMIT_AS)
    if hard != resource.RLIM_INFINITY:
        limit = min(limit, hard)
    try:
        # Only the soft limit: the next request may need a larger one (it scales with file size).
        resource.setrlimit(resource.RLIMIT_AS, (limit, hard))
    except (OSError, ValueError):
        # A seccomp filter without prlimit64 refuses it; the wall-clock limit and the unit's
        # MemoryMax still bound the child.
        return


def _no_limit() -> None:
    _, hard = resource.getrlimit(resource.RLIMIT_AS)
    try:
        resource.setrlimit(resource.RLIMIT_AS, (hard, hard))
    except (OSError, ValueError):
        return


def measure(config: Any, path: Path, memory_mb: int) -> tuple[Any, ...]:
    """Measure one file; never raises (every failure becomes an ``("error", kind, reason)``)."""
    try:
        from watcher.measure.run import measure_or_failure
        from watcher.records import ReadFailure

        outcome = measure_or_failure(path, config, memory_limit_mb=memory_mb)
        if isinstance(outcome, ReadFailure):
            return ("error", outcome.kind, outcome.reason)
        return ("ok", outcome)
    except MemoryError:  # the import itself, or building the failure, ran out
        return ("error", "memory", f"out of memory (limit {memory_mb} MB)")
    except Exception as exc:  # a bad config here must become a verdict, not a dead child
        first_line = (str(exc).splitlines() or [""])[0][:200]
        return ("error", "corrupt", f"{type(exc).__name__}: {first_line}")


def read_frame(stream: BinaryIO) -> bytes | None:
    """One length-prefixed frame, or None at end of stream."""
    header = stream.read(HEADER.size)
    if len(header) < HEADER.size:
        return None
    (length,) = HEADER.unpack(header)
    data = stream.read(length)
    return data if len(data) == length else None


def frame(data: bytes) -> bytes:
    return HEADER.pack(len(data)) + data


def main() -> int:
    _die_with_parent()
    # The parent decides when a measurement ends (it kills this process); a SIGTERM sent to the
    # whole service on stop must not turn a good run into an "unreadable" one.
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # Imported once, before the ready byte: measure_file imports its readers lazily, and the
    # first run would otherwise pay for them inside its time limit. The PSI-MS vocabulary
    # (about 0.5 s) is not loaded here: the readers key on accessions and need it only to name
    # an unknown term, which few runs have, while a burst restarts children every
    # ``recycle_after`` runs.
    import watcher.measure.readers.read
    import watcher.measure.run  # noqa: F401

    out = sys.stdout.buffer
    out.write(READY)
    out.flush()
    while (data := read_frame(sys.stdin.buffer)) is not None:
        config, path, memory_mb = pickle.loads(data)  # noqa: S301 - sent by our parent
        _limit_memory(int(memory_mb))
        result = measure(config, Path(path), int(memory_mb))
        _no_limit()
        try:
            answer = pickle.dumps(result)
        except MemoryError:
            answer = pickle.dumps(("error", "memory", f"out of memory (limit {memory_mb} MB)"))
        out.write(frame(answer))
        out.flush()
        if result[0] == "error" and result[1] == "memory":
            return 0
    return 0


if __name__ == "__main__":
    sys.exit(main())
