"""Store retention: job rows are kept as long as the health log keeps its days, then pruned.

A job row is also the memory that a file was seen: pruning it while its file is still in a
watched folder would measure and alert on that file again at the next scan. So only rows older
than ``health_log.keep_days`` whose file is gone (or has another size or mtime) are deleted, and
nothing is pruned while a watched folder is missing or empty, as an unmounted share looks. The
run history (``runs``, ``metrics``) is not pruned here: it is the baseline the rules read.
"""

from __future__ import annotations

import os
import stat
from typing import TYPE_CHECKING

from watcher.intake import vendor
from watcher.store import db, jobs

if TYPE_CHECKING:
    import sqlite3
    from collections.abc import Sequence
    from pathlib import Path

DAY_S = 86400.0


def cutoff_s(now_s: float, keep_days: int) -> float:
    """Rows last changed before this epoch second are older than the retention."""
    return now_s - keep_days * DAY_S


def folders_present(folders: Sequence[Path]) -> bool:
    """Every watched folder is a directory with at least one entry (a share is mounted)."""
    for folder in folders:
        try:
            with os.scandir(folder) as entries:
                if next(entries, None) is None:
                    return False
        except OSError:
            return False
    return True


def file_unchanged(job: jobs.Job) -> bool:
    """The job's file is still at its path with the size and mtime it was queued with.

    A vendor run folder is compared by its tree (``vendor.tree_stat``), as it was queued: its
    own stat never matches, and a dropped row would have it converted once more.
    """
    try:
        st = job.path.stat()
    except OSError:
        return False
    if stat.S_ISDIR(st.st_mode):
        tree = vendor.tree_stat(job.path)
        return tree is not None and (tree.size, tree.mtime_ns) == (job.size, job.mtime_ns)
    return (st.st_size, st.st_mtime_ns) == (job.size, job.mtime_ns)


def prune_jobs(
    conn: sqlite3.Connection, folders: Sequence[Path], keep_days: int, now_s: float
) -> int | None:
    """Delete finished job rows past the retention whose file is gone; returns how many, or None
    when there are such rows but a watched folder is missing or empty, so none was looked at.

    Reads and stats outside the write transaction; the delete is one short transaction.
    """
    old = jobs.finished_before(conn, cutoff_s(now_s, keep_days))
    if not old:
        return 0
    if not folders_present(folders):
        return None
    gone = [job.id for job in old if not file_unchanged(job)]
    if not gone:
        return 0
    with db.write(conn):
        return jobs.delete(conn, gone)
