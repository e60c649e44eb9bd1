"""The ``ionwarden`` command as a user runs it: ``python -m watcher ARGS`` in a subprocess.

``run_cli`` waits for it and returns the ``CompletedProcess`` (``returncode``, ``stdout``,
``stderr`` as text); ``command`` and ``cli_env`` build the same call for a long-running
``Popen`` (the daemon). The child's ``PYTHONPATH`` is this checkout, so the code under test runs.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from collections.abc import Iterable, Mapping

REPO = Path(__file__).resolve().parents[2]

Result = subprocess.CompletedProcess[str]


def command(*args: str | Path) -> list[str]:
    """The argument vector of ``ionwarden ARGS``."""
    return [sys.executable, "-m", "watcher", *map(str, args)]


def cli_env(
    env: Mapping[str, str] | None = None,
    *,
    set_env: Mapping[str, str] | None = None,
    unset: Iterable[str] = (),
) -> dict[str, str]:
    """The child's environment: ``env`` (default: this process's) with ``PYTHONPATH`` at the
    checkout, without the names in ``unset`` (``NAME_*`` drops a prefix), plus ``set_env``."""
    out = dict(os.environ if env is None else env)
    for name in unset:
        if name.endswith("*"):
            for key in [k for k in out if k.startswith(name[:-1])]:
                del out[key]
        else:
            out.pop(name, None)
    out["PYTHONPATH"] = str(REPO)
    out.update(set_env or {})
    return out


def run_cli(
    *args: str | Path,
    cwd: Path | None = None,
    env: Mapping[str, str] | None = None,
    set_env: Mapping[str, str] | None = None,
    unset: Iterable[str] = (),
    timeout: float = 60.0,
) -> Result:
    """Run ``ionwarden ARGS`` to its end (``timeout`` s at most: ``TimeoutExpired``)."""
    return subprocess.run(
        command(*args),
        capture_output=True,
        text=True,
        timeout=timeout,
        cwd=cwd,
        env=cli_env(env, set_env=set_env, unset=unset),
        check=False,
    )
