"""Vendor runs at intake: a run folder is one run, found by name, settled as a whole tree.

Real folders and files; the settle clock is the test's (as in test_pending.py). A vendor run
folder (``*.d``) holds nested files that keep being written while the acquisition PC copies it
(common practice of vendor formats: a folder of binary files and method XML).
"""

from __future__ import annotations

import os
from typing import TYPE_CHECKING

from watcher.config import Watch
from watcher.intake import folderwalk, watch
from watcher.intake.pending import Settled, Settler
from watcher.intake.vendor import is_vendor_name, tree_stat

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.intake.readiness import FileStat

VENDOR = ("*.d", "*.raw")


def _never_known(path: Path, stat: FileStat) -> bool:
    return False


def _vendor_run(root: Path, name: str = "QC_0001.d") -> Path:
    run = root / name
    (run / "AcqData").mkdir(parents=True)
    (run / "AcqData" / "MSScan.bin").write_bytes(b"\x00" * 1000)
    (run / "AcqData" / "MSPeak.bin").write_bytes(b"\x01" * 234)
    (run / "method.xml").write_text("<Method/>\n")
    return run


def test_tree_stat_is_total_size_and_newest_mtime(tmp_path: Path) -> None:
    """A folder's identity: the sum of its files' sizes and the newest mtime in the tree."""
    run = _vendor_run(tmp_path)
    for i, path in enumerate(sorted(run.rglob("*"))):
        os.utime(path, ns=(1_000_000_000 * (10 + i), 1_000_000_000 * (10 + i)))
    os.utime(run, ns=(5_000_000_000, 5_000_000_000))
    newest = max(p.stat().st_mtime_ns for p in run.rglob("*"))
    stat = tree_stat(run)
    assert stat is not None
    assert (stat.size, stat.mtime_ns) == (1000 + 234 + len("<Method/>\n"), newest)
    (run / "AcqData" / "MSScan.bin").write_bytes(b"\x00" * 1001)  # deep inside, grown
    grown = tree_stat(run)
    assert grown is not None
    assert grown.size == stat.size + 1
    assert grown.mtime_ns > stat.mtime_ns


def test_links_inside_a_run_folder_are_not_followed(tmp_path: Path) -> None:
    """A link in the run folder to a big file elsewhere adds nothing to the tree's size."""
    run = _vendor_run(tmp_path / "exports")
    outside = tmp_path / "elsewhere.bin"
    outside.write_bytes(b"x" * 50_000)
    before = tree_stat(run)
    (run / "link.bin").symlink_to(outside)
    after = tree_stat(run)
    assert before is not None
    assert after is not None
    assert after.size == before.size


def test_walk_finds_a_run_folder_as_one_run(tmp_path: Path) -> None:
    """``*.d`` folders and ``*.raw`` files are runs; what is inside a run folder is not walked
    (an mzML a converter left inside it is part of that run, not a run of its own)."""
    run = _vendor_run(tmp_path)
    (run / "inside.mzML").write_text("<mzML/>")
    raw = tmp_path / "S01_0002.raw"
    raw.write_bytes(b"\x00" * 10)
    (tmp_path / "QC_0003.mzML").write_text("<mzML/>")
    seen = folderwalk.walk([tmp_path], ("*.mzML",), (".*",), recursive=True, vendor=VENDOR)
    assert sorted(s.path.name for s in seen) == ["QC_0001.d", "QC_0003.mzML", "S01_0002.raw"]
    folder = next(s for s in seen if s.path == run)
    assert folder.stat == tree_stat(run)
    # Without convert.patterns the folder is an ordinary folder, walked into as before.
    plain = folderwalk.walk([tmp_path], ("*.mzML",), (".*",), recursive=True)
    assert sorted(s.path.name for s in plain) == ["QC_0003.mzML", "inside.mzML"]


def test_vendor_names_follow_the_extension_rules_and_ignore(tmp_path: Path) -> None:
    """Extensions match without case (instruments write .D and .d); ignore patterns win."""
    assert is_vendor_name("QC_0001.D", VENDOR)
    assert not is_vendor_name(".QC_0001.d", VENDOR, (".*",))
    assert not is_vendor_name("QC_0001.d", ())


def test_run_folder_settles_only_when_its_whole_tree_is_unchanged(tmp_path: Path) -> None:
    """A folder hint starts the settle clock; a file written deep inside restarts it, so the
    run comes out settle_s after the last write anywhere in the tree, once."""
    run = _vendor_run(tmp_path)
    settler = Settler(Watch(folders=(tmp_path,), settle_s=2.0), vendor=VENDOR)
    settler.take_hint(watch.Hint(path=run, is_dir=True), 0.0)
    assert list(settler.pending) == [run]
    out: list[tuple[float, Settled]] = []
    now_s = 0.0
    while now_s <= 12.0:
        if now_s == 2.0:  # the copy is still going: one more block of the scan data
            with (run / "AcqData" / "MSScan.bin").open("ab") as fh:
                fh.write(b"\x02" * 100)
        out.extend((now_s, item) for item in settler.due(now_s, _never_known))
        now_s += 0.5
    assert len(out) == 1
    at_s, item = out[0]
    # Looks at 0.0 (first stat) and 2.0 (unchanged, but 2 s is due only at 2.0: the write
    # happened in the same step, so the change is seen at 2.0); ready settle_s after that.
    assert at_s >= 4.0
    assert item.path == run
    assert item.incomplete is None
    assert item.stat == tree_stat(run)
    assert settler.pending == {}


def test_a_full_scan_queues_the_folder_not_its_files(tmp_path: Path) -> None:
    """``Settler.walk`` with vendor patterns pends the run folder as one entry."""
    run = _vendor_run(tmp_path)
    settler = Settler(Watch(folders=(tmp_path,), patterns=("*.bin",), settle_s=1.0), vendor=VENDOR)
    seen, added = settler.walk(set(), 0.0)
    assert (seen, added) == (1, 1)
    assert list(settler.pending) == [run]


def test_hints_from_inside_a_run_folder_are_part_of_that_run(tmp_path: Path) -> None:
    """A file event or a sub-folder event inside QC_0001.d (even a file named like a run)
    pends nothing of its own; the folder's own hint pends the folder."""
    run = _vendor_run(tmp_path)
    (run / "AcqData" / "inside.mzML").write_text("<mzML/>")
    settler = Settler(Watch(folders=(tmp_path,), settle_s=1.0), vendor=VENDOR)
    settler.take_hint(watch.Hint(path=run / "AcqData" / "inside.mzML"), 0.0)
    settler.take_hint(watch.Hint(path=run / "AcqData", is_dir=True), 0.0)
    assert settler.pending == {}
    settler.take_hint(watch.Hint(path=run, is_dir=True), 0.0)
    assert list(settler.pending) == [run]
