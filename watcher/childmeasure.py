"""Entry point of the measuring child process: one run file in, its RunMetrics or ReadError out.

Run as ``python -m watcher.childmeasure``. The parent writes a pickle of ``(config, path,
memory_mb)`` to stdin; the child caps its own address space (RLIMIT_AS) before importing the
readers, measures, and writes a pickle of ``("ok", metrics)`` or ``("error", kind, reason)`` to
stdout. Both ends are this package, so pickle carries the frozen records as they are.
"""

from __future__ import annotations

import ctypes
import os
import pickle
import resource
import signal
import sys
from pathlib import Path
from typing import Any

_PR_SET_PDEATHSIG = 1


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
    try:
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    except (OSError, ValueError):
        # A seccomp filter without prlimit64 refuses it; the wall-clock limit and the unit's
        # MemoryMax still bound the child.
        return


def measure(config: Any, path: Path, memory_mb: int) -> tuple[Any, ...]:
    """Measure one file; never raises (every failure becomes an ``("error", kind, reason)``)."""
    try:
        from watcher.errors import ReadError
        from watcher.measure.run import measure_file

        try:
            return ("ok", measure_file(path, config, progress=None))
        except ReadError as exc:
            return ("error", exc.kind, exc.reason)
    except MemoryError:
        return ("error", "memory", f"out of memory (limit {memory_mb} MB)")
    except Exception as exc:  # any reader failure must become a verdict, not a crash
        first_line = (str(exc).splitlines() or [""])[0][:200]
        return ("error", "corrupt", f"{type(exc).__name__}: {first_line}")


def main() -> int:
    _die_with_parent()
    config, path, memory_mb = pickle.loads(sys.stdin.buffer.read())  # noqa: S301 - our parent
    _limit_memory(int(memory_mb))
    result = measure(config, Path(path), int(memory_mb))
    try:
        data = pickle.dumps(result)
    except MemoryError:
        data = pickle.dumps(("error", "memory", f"out of memory (limit {memory_mb} MB)"))
    sys.stdout.buffer.write(data)
    sys.stdout.buffer.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main())
