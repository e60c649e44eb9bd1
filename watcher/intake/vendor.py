"""Vendor raw runs: which names are runs for the lab's converter, and when a run folder settled.

Most instruments write a vendor format, often a folder of many files (``*.d``); a lab that
converts on the watching server names them in ``convert.patterns``. Such a folder is one run:
it is not walked into, and it has settled when its whole tree has been unchanged for
``settle_s``. Its identity for the job table is the tree's total size and newest mtime (of
files and folders: a file added, removed or renamed changes a folder's mtime), so the rules in
``readiness`` and the "once per identity" of the job table hold for folders as for files.
Only directory entries and stats are read here; nothing is opened or changed.
"""

from __future__ import annotations

import os
import stat
from typing import TYPE_CHECKING

from watcher.intake.folderwalk import is_run_name
from watcher.intake.readiness import FileStat

if TYPE_CHECKING:
    from collections.abc import Sequence
    from pathlib import Path

MAX_TREE_ENTRIES = 1_000_000  # a vendor run folder holds tens to thousands of files


def is_vendor_name(name: str, patterns: Sequence[str], ignore: Sequence[str] = ()) -> bool:
    """Whether a file or folder name is a vendor run (``convert.patterns``, ignore wins)."""
    return bool(patterns) and is_run_name(name, patterns, ignore)


def inside_vendor_run(
    path: Path, folders: Sequence[Path], patterns: Sequence[str], ignore: Sequence[str] = ()
) -> bool:
    """Whether ``path`` lies inside a vendor run folder under one of the watched ``folders``
    (then it is part of that run, never a run of its own, whatever its name)."""
    if not patterns:
        return False
    for folder in folders:
        try:
            parts = path.relative_to(folder).parts
        except ValueError:
            continue
        return any(is_vendor_name(part, patterns, ignore) for part in parts[:-1])
    return False


def tree_stat(path: Path) -> FileStat | None:
    """Size and mtime of a vendor run: a regular file's own, or a folder tree's total size and
    newest mtime (the folder itself included). None when it is gone or neither.

    Symbolic links inside the tree are counted by their own stat, never followed.
    """
    try:
        st = os.stat(path)
    except OSError:
        return None
    if stat.S_ISREG(st.st_mode):
        return FileStat(st.st_size, st.st_mtime_ns)
    if not stat.S_ISDIR(st.st_mode):
        return None
    total, newest, seen = 0, st.st_mtime_ns, 0
    stack = [os.fspath(path)]
    while stack:
        folder = stack.pop()
        try:
            with os.scandir(folder) as entries:
                for entry in entries:
                    seen += 1
                    if seen > MAX_TREE_ENTRIES:
                        return FileStat(total, newest)
                    try:
                        est = entry.stat(follow_symlinks=False)
                    except OSError:
                        continue  # vanished while listed: the folder's mtime shows the change
                    newest = max(newest, est.st_mtime_ns)
                    if stat.S_ISDIR(est.st_mode):
                        stack.append(entry.path)
                    elif stat.S_ISREG(est.st_mode):
                        total += est.st_size
        except OSError:
            continue
    return FileStat(total, newest)
