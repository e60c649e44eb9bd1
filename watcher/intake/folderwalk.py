"""Folder walks and their reconciliation with the job table: which files are runs, which are new.

Events are only hints; the truth is a full scan, done at start-up (so runs that landed while the
daemon was down are caught up), every ``rescan_interval_s`` and at once after an inotify overflow.
The scan only reads directory entries and stats; it never opens, moves or deletes a file.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from fnmatch import fnmatchcase
from pathlib import Path
from typing import TYPE_CHECKING

from watcher.intake.readiness import FileStat

if TYPE_CHECKING:
    from collections.abc import Iterable, Iterator, Sequence

_WILDCARDS = "*?]"


@dataclass(frozen=True, slots=True)
class Seen:
    """One file found by a scan."""

    path: Path
    stat: FileStat


def _matches(name: str, pattern: str) -> bool:
    # The literal tail after the last wildcard is the extension (".mzML.gz"): compare it without
    # case, because instruments export ".mzml" and ".MZML" alike; the rest stays case-sensitive.
    cut = max(pattern.rfind(c) for c in _WILDCARDS) + 1
    suffix = pattern[cut:]
    if not suffix:
        return fnmatchcase(name, pattern)
    if not name.lower().endswith(suffix.lower()):
        return False
    return fnmatchcase(name[: len(name) - len(suffix)], pattern[:cut])


def is_ignored(name: str, ignore: Sequence[str]) -> bool:
    """True when a file or folder name matches an ignore pattern (temporary or partial names)."""
    return any(_matches(name, pattern) for pattern in ignore)


def is_run_name(name: str, patterns: Sequence[str], ignore: Sequence[str]) -> bool:
    """True when a file name is a run to watch: it matches a pattern and no ignore pattern.

    Patterns are fnmatch globs, case-insensitive for the extension (``*.mzML`` matches
    ``QC_1.MZML``); ignore patterns win (``QC_1.mzML.part`` and ``.QC_1.mzML`` are skipped).
    """
    if is_ignored(name, ignore):
        return False
    return any(_matches(name, pattern) for pattern in patterns)


def is_run_path(path: Path, root: Path, patterns: Sequence[str], ignore: Sequence[str]) -> bool:
    """``is_run_name`` for a path under a root; a file inside an ignored folder is skipped."""
    try:
        parts = path.relative_to(root).parts
    except ValueError:
        parts = (path.name,)
    if any(is_ignored(part, ignore) for part in parts[:-1]):
        return False
    return is_run_name(path.name, patterns, ignore)


def _walk(
    root: Path, *, recursive: bool, ignore: Sequence[str], vendor: Sequence[str] = ()
) -> Iterator[os.DirEntry[str]]:
    stack = [root]
    while stack:
        folder = stack.pop()
        try:
            with os.scandir(folder) as entries:
                for entry in entries:
                    try:
                        if entry.is_dir(follow_symlinks=False):
                            if is_ignored(entry.name, ignore):
                                continue
                            if vendor and is_run_name(entry.name, vendor, ignore):
                                yield entry  # a vendor run folder is one run: not walked into
                            elif recursive:
                                stack.append(Path(entry.path))
                        elif entry.is_file():
                            yield entry
                    except OSError:
                        continue  # vanished between listing and stat
        except OSError:
            continue  # folder removed or unreadable: the next scan tries again


def walk(
    folders: Iterable[Path],
    patterns: Sequence[str],
    ignore: Sequence[str],
    *,
    recursive: bool,
    vendor: Sequence[str] = (),
) -> list[Seen]:
    """Every run file under the folders, oldest first by mtime (then path, for a stable order).

    ``vendor`` (``convert.patterns``) names vendor runs, files or folders; a folder's stat is
    its whole tree's (``watcher.intake.vendor.tree_stat``).
    """
    from watcher.intake.vendor import tree_stat

    found: list[Seen] = []
    every = (*patterns, *vendor)
    for root in folders:
        for entry in _walk(root, recursive=recursive, ignore=ignore, vendor=vendor):
            if not is_run_name(entry.name, every, ignore):
                continue
            try:
                if entry.is_dir(follow_symlinks=False):
                    tree = tree_stat(Path(entry.path))
                    if tree is not None:
                        found.append(Seen(Path(entry.path), tree))
                    continue
                st = entry.stat()
            except OSError:
                continue
            found.append(Seen(Path(entry.path), FileStat(st.st_size, st.st_mtime_ns)))
    found.sort(key=lambda s: (s.stat.mtime_ns, str(s.path)))
    return found


def leads_outside(path: Path, folders: Iterable[Path]) -> bool:
    """True when ``path`` resolves (through symbolic links) to a place under none of ``folders``.

    The folders are resolved too, so a watched folder that is itself a link still holds its own
    files. No folders (nothing watched, as for ``check``) means nothing is outside. Costs one
    lstat per path component; nothing is opened.
    """
    folders = list(folders)
    if not folders:
        return False
    real = Path(os.path.realpath(path))
    return not any(real.is_relative_to(os.path.realpath(folder)) for folder in folders)


def unknown(seen: Iterable[Seen], identities: set[tuple[str, int, int]]) -> list[Seen]:
    """The scanned files whose (path, size, mtime_ns) has no job yet, in scan order.

    A file changed in place has a new size or mtime, so it comes back here and is processed again.
    """
    return [s for s in seen if (str(s.path), s.stat.size, s.stat.mtime_ns) not in identities]
