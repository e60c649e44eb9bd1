"""Folder walks: which names are runs, oldest first, and which files the job table lacks."""

from __future__ import annotations

import os
from typing import TYPE_CHECKING

import pytest

from watcher.config import Watch
from watcher.intake.folderwalk import is_run_name, is_run_path, unknown, walk
from watcher.intake.readiness import FileStat

if TYPE_CHECKING:
    from pathlib import Path

PATTERNS = Watch().patterns
IGNORE = Watch().ignore


@pytest.mark.parametrize(
    ("name", "is_run"),
    [
        ("QC_0001.mzML", True),
        ("QC_0001.mzml", True),  # extension without case: instruments differ
        ("QC_0001.MZML", True),
        ("S01_0002.mzML.gz", True),
        ("S01_0002.mzXML", True),
        ("S01_0002.MGF", True),
        ("S01_0002.raw", False),
        ("QC_0001.mzML.part", False),  # partial copy
        ("QC_0001.tmp", False),
        (".QC_0001.mzML", False),  # rsync's hidden temporary name
        ("~$QC_0001.mzML", False),
        ("QC_0001.mzML.gz.tmp", False),
    ],
)
def test_run_names(name, is_run):
    """Default patterns take the four formats in any extension case; ignore patterns win."""
    assert is_run_name(name, PATTERNS, IGNORE) is is_run


def test_stem_stays_case_sensitive():
    """Only the extension ignores case: 'QC_*.mzML' does not take 'qc_1.mzML'."""
    assert is_run_name("QC_1.MZML", ["QC_*.mzML"], [])
    assert not is_run_name("qc_1.mzML", ["QC_*.mzML"], [])


def test_file_in_ignored_folder_is_skipped(tmp_path):
    """A run inside a hidden staging folder is not a run yet."""
    assert not is_run_path(tmp_path / ".staging" / "QC_1.mzML", tmp_path, PATTERNS, IGNORE)
    assert is_run_path(tmp_path / "batch1" / "QC_1.mzML", tmp_path, PATTERNS, IGNORE)


def _touch(path: Path, mtime_s: int, data: bytes = b"x") -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(data)
    os.utime(path, (mtime_s, mtime_s))


def test_scan_oldest_first_recursive(tmp_path):
    """A walk lists run files under every folder, oldest mtime first, skipping other names."""
    _touch(tmp_path / "b" / "S02_1.mzML", 2000)
    _touch(tmp_path / "QC_1.mzML", 3000)
    _touch(tmp_path / "S01_1.mgf", 1000)
    _touch(tmp_path / "notes.txt", 500)
    _touch(tmp_path / ".hidden" / "QC_9.mzML", 100)
    seen = walk([tmp_path], PATTERNS, IGNORE, recursive=True)
    assert [s.path.name for s in seen] == ["S01_1.mgf", "S02_1.mzML", "QC_1.mzML"]
    flat = walk([tmp_path], PATTERNS, IGNORE, recursive=False)
    assert [s.path.name for s in flat] == ["S01_1.mgf", "QC_1.mzML"]


def test_scan_of_missing_folder_is_empty(tmp_path):
    """A folder that vanished walks as empty instead of raising."""
    assert walk([tmp_path / "gone"], PATTERNS, IGNORE, recursive=True) == []


def test_unknown_keeps_new_and_changed(tmp_path):
    """Known identities are dropped; a file changed in place (new size) comes back."""
    _touch(tmp_path / "QC_1.mzML", 1000, b"abc")
    _touch(tmp_path / "QC_2.mzML", 2000, b"abc")
    seen = walk([tmp_path], PATTERNS, IGNORE, recursive=True)
    known = {(str(tmp_path / "QC_1.mzML"), 3, 1000 * 10**9)}
    assert [s.path.name for s in unknown(seen, known)] == ["QC_2.mzML"]
    _touch(tmp_path / "QC_1.mzML", 1000, b"abcd")
    seen = walk([tmp_path], PATTERNS, IGNORE, recursive=True)
    names = [s.path.name for s in unknown(seen, known)]
    assert names == ["QC_1.mzML", "QC_2.mzML"]
    assert seen[0].stat == FileStat(4, 1000 * 10**9)
