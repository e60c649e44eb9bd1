"""The state folder's lock: one daemon per ``state_dir``, held for the process's lifetime.

Two daemons on one store would claim each other's jobs and judge files twice, and two writers of
the rotating log file lose lines (docs/reliability.md item 6). ``fcntl.flock`` is released by the
kernel when the process dies, so a kill -9 leaves no stale lock behind; the pid written into the
file only names the holder in the second daemon's message.
"""

from __future__ import annotations

import contextlib
import fcntl
import os
from typing import TYPE_CHECKING

from watcher.errors import DaemonRunningError, StoreError

if TYPE_CHECKING:
    from pathlib import Path

LOCK_NAME = "ionwarden.lock"


def acquire(state_dir: Path) -> int:
    """Take the exclusive lock on ``state_dir/ionwarden.lock`` and write our pid into it.

    Returns:
        The open file descriptor; keep it open as long as the daemon runs (closing it unlocks).

    Raises:
        DaemonRunningError: another process holds the lock (its pid is in the message).
        StoreError: the lock file cannot be created.
    """
    path = state_dir / LOCK_NAME
    try:
        state_dir.mkdir(parents=True, exist_ok=True)
        # Not O_TRUNC: the holder's pid must stay readable until we own the lock.
        fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o644)
    except OSError as exc:
        raise StoreError(f"cannot create the lock file {path}: {exc.strerror}") from exc
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        holder = _read_pid(fd)
        os.close(fd)
        who = f"pid {holder}" if holder else "another process"
        raise DaemonRunningError(
            f"another ionwarden daemon ({who}) is already running on state_dir {state_dir} "
            f"(it holds {path}); stop it first, or give this config another state_dir"
        ) from None
    try:
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"{os.getpid()}\n".encode(), 0)
    except OSError:
        # A full disk or a file-size limit: the lock holds without the pid in it (a second
        # daemon is still refused, it names "another process"), and the daemon must still start
        # and wait for its store rather than exit.
        pass
    return fd


def _read_pid(fd: int) -> int | None:
    with contextlib.suppress(OSError, ValueError):
        return int(os.pread(fd, 32, 0).decode().strip())
    return None
