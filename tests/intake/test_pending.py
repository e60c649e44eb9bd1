"""The settler on a real folder: hints and scans in, settled or given-up files out, once each."""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher.config import Watch
from watcher.intake import watch
from watcher.intake.pending import Settled, Settler

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.intake.readiness import FileStat

# MGF blocks open with BEGIN IONS and close with END IONS (common practice for the format).
WHOLE_MGF = "BEGIN IONS\nPEPMASS=445.12\n445.12 1000\nEND IONS\n"
CUT_MGF = "BEGIN IONS\nPEPMASS=445.12\n445.12 1000\n"


def _never_known(path: Path, stat: FileStat) -> bool:
    return False


def _settle(settler: Settler, start_s: float, end_s: float) -> list[Settled]:
    """Every file that comes out of ``due`` while the clock steps from start_s to end_s."""
    out: list[Settled] = []
    now_s = start_s
    while now_s <= end_s:
        out.extend(settler.due(now_s, _never_known))
        now_s += 0.5
    return out


def test_whole_file_settles_once_after_settle_s(tmp_path: Path) -> None:
    """A whole file named by a hint comes out once, after two unchanged looks settle_s apart."""
    run = tmp_path / "QC_001.mgf"
    run.write_text(WHOLE_MGF)
    settler = Settler(Watch(folders=(tmp_path,), settle_s=2.0))
    settler.take_hint(watch.Hint(path=run, is_dir=False), 100.0)
    assert settler.due(101.0, _never_known) == []  # first look only records the stat
    out = _settle(settler, 101.0, 110.0)
    assert [s.path for s in out] == [run]
    assert out[0].incomplete is None
    assert out[0].stat.size == len(WHOLE_MGF)
    assert settler.pending == {}


def test_known_identity_is_forgotten_not_queued(tmp_path: Path) -> None:
    """A settled file whose identity the job table knows leaves pending without coming out."""
    run = tmp_path / "S01.mgf"
    run.write_text(WHOLE_MGF)
    settler = Settler(Watch(folders=(tmp_path,), settle_s=1.0))
    settler.take_hint(watch.Hint(path=run, is_dir=False), 0.0)
    out: list[Settled] = []
    for now_s in (0.5, 2.0, 3.0, 4.0):
        out.extend(settler.due(now_s, lambda path, stat: True))
    assert out == []
    assert settler.pending == {}


def test_cut_file_gives_up_with_reason_after_stall_s(tmp_path: Path) -> None:
    """A file that stays unchanged but incomplete comes out after stall_s, marked incomplete."""
    run = tmp_path / "QC_005.mgf"
    run.write_text(CUT_MGF)
    settler = Settler(Watch(folders=(tmp_path,), settle_s=1.0, stall_s=20.0))
    files, added = settler.walk(set(), 0.0)
    assert (files, added) == (1, 1)
    assert _settle(settler, 0.5, 15.0) == []  # not yet given up: still waiting
    out = _settle(settler, 15.5, 40.0)
    assert [s.path for s in out] == [run]
    assert out[0].incomplete is not None
    assert out[0].incomplete.startswith("incomplete:")


def test_folder_hint_and_scan_skip_known_and_ignored(tmp_path: Path) -> None:
    """A folder hint queues its run files; a scan skips known identities and ignored names."""
    sub = tmp_path / "batch"
    sub.mkdir()
    a, b = sub / "S01.mgf", sub / "S02.mgf"
    a.write_text(WHOLE_MGF)
    b.write_text(WHOLE_MGF)
    (sub / "S03.mgf.part").write_text(WHOLE_MGF)
    settler = Settler(Watch(folders=(tmp_path,)))
    settler.take_hint(watch.Hint(path=sub, is_dir=True), 0.0)
    assert sorted(settler.pending) == [a, b]
    fresh = Settler(Watch(folders=(tmp_path,)))
    st = a.stat()
    files, added = fresh.walk({(str(a), st.st_size, st.st_mtime_ns)}, 0.0)
    assert (files, added) == (2, 1)
    assert list(fresh.pending) == [b]


def test_fifo_named_like_a_run_is_never_opened(tmp_path: Path) -> None:
    """A FIFO called QC_009.mzML is dropped, not opened: opening it would block the main loop."""
    import os

    fifo = tmp_path / "QC_009.mzML"
    os.mkfifo(fifo)
    settler = Settler(Watch(folders=(tmp_path,), settle_s=1.0))
    settler.take_hint(watch.Hint(path=fifo, is_dir=False), 0.0)
    assert _settle(settler, 0.5, 5.0) == []  # returns at all: nothing blocked on the FIFO
    assert settler.pending == {}
