"""What every ``ionwarden`` process does before its command: one OpenBLAS thread.

numpy's OpenBLAS starts a thread per core when numpy is imported, and they spin: 0.15 s of CPU
at every ``ionwarden check`` on a 2-core machine (bench/startup_bench.py). ionwarden's linear
algebra is a few small line fits, so ``watcher.cli.main`` asks for one thread unless the user
set ``OPENBLAS_NUM_THREADS`` (OpenBLAS reads it once, at load: it must be set before numpy).
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

_PROBE = (
    "import os, watcher.cli.main, numpy\n"
    "print(os.environ['OPENBLAS_NUM_THREADS'], len(os.listdir('/proc/self/task')))\n"
)


def _probe(env_value: str | None) -> tuple[str, int]:
    env = {k: v for k, v in os.environ.items() if k != "OPENBLAS_NUM_THREADS"}
    if env_value is not None:
        env["OPENBLAS_NUM_THREADS"] = env_value
    out = subprocess.run(
        [sys.executable, "-c", _PROBE], capture_output=True, text=True, env=env, check=True
    )
    value, threads = out.stdout.split()
    return value, int(threads)


@pytest.mark.skipif(not os.path.isdir("/proc/self/task"), reason="needs Linux /proc")
def test_numpy_starts_with_one_blas_thread() -> None:
    value, threads = _probe(None)
    assert value == "1"
    assert threads == 1  # the main thread alone: no BLAS pool


def test_a_users_setting_is_kept() -> None:
    value, _threads = _probe("3")
    assert value == "3"
