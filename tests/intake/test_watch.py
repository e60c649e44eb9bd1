"""The watchdog handler: real observers on a real folder turn file events into hints."""

from __future__ import annotations

import logging
import os
import queue
import shutil
import time
from typing import TYPE_CHECKING

import pytest

from watcher.config import Watch
from watcher.intake.watch import Hint, RescanFlag, start_watching, stop_watching

if TYPE_CHECKING:
    from pathlib import Path


def _collect(hints: queue.Queue[Hint], want: set[Path], deadline_s: float = 5.0) -> set[Hint]:
    got: set[Hint] = set()
    end = time.monotonic() + deadline_s
    while time.monotonic() < end and not want <= {h.path for h in got}:
        try:
            got.add(hints.get(timeout=0.05))
        except queue.Empty:
            continue
    return got


@pytest.fixture(params=[False, True], ids=["inotify", "polling"])
def watching(request, tmp_path):
    folder = tmp_path / "exports"
    folder.mkdir()
    config = Watch(folders=(folder,), polling=request.param, poll_interval_s=0.1)
    hints: queue.Queue[Hint] = queue.Queue(maxsize=100)
    rescan = RescanFlag()
    observer, overflow = start_watching(config, hints, rescan)
    yield folder.resolve(), hints, rescan, tmp_path
    stop_watching(observer, overflow)


def test_written_renamed_and_moved_files_are_hinted(watching):
    """Chunked writes, tmp-then-rename and a move from outside each give a hint for the run."""
    folder, hints, _, outside = watching
    with (folder / "QC_1.mzML").open("wb") as fh:
        for _ in range(3):
            fh.write(b"<chunk/>" * 100)
            fh.flush()
    (folder / "QC_2.mzML.part").write_bytes(b"x")
    (folder / "QC_2.mzML.part").rename(folder / "QC_2.mzML")
    (outside / "S01_3.mzML").write_bytes(b"y")
    shutil.move(outside / "S01_3.mzML", folder / "S01_3.mzML")
    want = {folder / n for n in ("QC_1.mzML", "QC_2.mzML", "S01_3.mzML")}
    got = _collect(hints, want)
    assert want <= {h.path for h in got}
    assert all(not h.path.name.endswith(".part") for h in got)


def test_folder_moved_in_is_hinted_as_folder(watching):
    """A folder moved in gives a folder hint, so the daemon scans it for runs."""
    folder, hints, _, outside = watching
    batch = outside / "batch7"
    batch.mkdir()
    (batch / "QC_7.mzML").write_bytes(b"z")
    os.rename(batch, folder / "batch7")
    got = _collect(hints, {folder / "batch7"})
    assert Hint(folder / "batch7", is_dir=True) in got


def test_other_names_give_no_hint(watching):
    """Non-run names and ignored temporaries are filtered on the dispatcher thread."""
    folder, hints, _, _ = watching
    (folder / "notes.txt").write_bytes(b"a")
    (folder / ".QC_1.mzML").write_bytes(b"a")
    (folder / "QC_9.mzML").write_bytes(b"a")  # marker: once it arrives, the others had their turn
    got = _collect(hints, {folder / "QC_9.mzML"})
    assert {h.path.name for h in got} == {"QC_9.mzML"}


def test_full_queue_asks_for_rescan(tmp_path):
    """When the hint queue is full the handler drops the hint and flags a full scan instead."""
    folder = tmp_path / "exports"
    folder.mkdir()
    hints: queue.Queue[Hint] = queue.Queue(maxsize=1)
    rescan = RescanFlag()
    observer, overflow = start_watching(Watch(folders=(folder,)), hints, rescan)
    try:
        for i in range(5):
            (folder / f"QC_{i}.mzML").write_bytes(b"a")
        end = time.monotonic() + 5
        reason = None
        while reason is None and time.monotonic() < end:
            reason = rescan.take()
            time.sleep(0.02)
        assert reason == "hint queue full"
    finally:
        stop_watching(observer, overflow)


def test_overflow_warning_asks_for_rescan(tmp_path):
    """watchdog's inotify overflow warning (logged on the 'watchdog' logger) flags a full scan."""
    folder = tmp_path / "exports"
    folder.mkdir()
    rescan = RescanFlag()
    observer, overflow = start_watching(Watch(folders=(folder,)), queue.Queue(), rescan)
    try:
        # The text watchdog 7.1 logs in observers/inotify_c.py on IN_Q_OVERFLOW.
        logging.getLogger("watchdog.observers.inotify_c").warning(
            "Inotify queue overflowed; filesystem events were lost"
        )
        assert rescan.take() == "inotify overflow"
        assert rescan.take() is None
    finally:
        stop_watching(observer, overflow)
