"""The converter step: the lab's program run without a shell, in its own process group, with a
time limit; its run file found, its failures one line with exit code and last stderr line.

The converter is tests/helpers/converter.py (a real subprocess writing a synth/ run); the vendor
runs are folders and files written here. The original is compared byte for byte and stat for
stat before and after: the daemon only reads it.
"""

from __future__ import annotations

import os
import sys
import threading
from pathlib import Path

import pytest

from tests.helpers.wait import wait_for
from watcher.config import Config, Convert
from watcher.daemon import convert
from watcher.measure.run import measure_file

CONVERTER = Path(__file__).resolve().parents[1] / "helpers" / "converter.py"
MS1_SCANS = 10  # tests/helpers/converter.py: 20 s at synth's default 2 s MS1 interval


def _settings(*extra: str, timeout_s: float = 60.0) -> Convert:
    command = (sys.executable, str(CONVERTER), "{input}", "-o", "{output_dir}", *extra)
    return Convert(patterns=("*.d",), command=command, timeout_s=timeout_s)


def _vendor_run(root: Path, name: str = "QC_0001.d") -> Path:
    """A vendor run folder as instruments write them: nested files of binary data."""
    run = root / "exports" / name
    (run / "AcqData").mkdir(parents=True)
    (run / "AcqData" / "MSScan.bin").write_bytes(bytes(range(256)) * 64)
    (run / "AcqData" / "MSProfile.bin").write_bytes(b"\x01\x02" * 999)
    (run / "sample_info.xml").write_text("<SampleInfo name='QC 1'/>\n")
    return run


def _snapshot(root: Path) -> dict[str, tuple[bytes, int, int]]:
    out: dict[str, tuple[bytes, int, int]] = {}
    for path in sorted(root.rglob("*")):
        st = path.stat()
        data = path.read_bytes() if path.is_file() else b""
        out[str(path.relative_to(root))] = (data, st.st_mtime_ns, st.st_mode)
    return out


def test_converted_run_is_measured_and_the_original_is_untouched(tmp_path: Path) -> None:
    """A folder run converts to one mzML that measures as the synth truth says (10 MS1, 10
    MS2); every file of the original has the same bytes, mtime and mode as before."""
    run = _vendor_run(tmp_path)
    before = _snapshot(run)
    out_dir = convert.output_dir(tmp_path / "state", 7)
    written = convert.convert(run, _settings(), out_dir)
    assert written == out_dir / "QC_0001.mzML"
    metrics = measure_file(written, Config())
    assert (metrics.signal.ms1_count, metrics.signal.ms2_count) == (MS1_SCANS, MS1_SCANS)
    assert _snapshot(run) == before


def test_a_second_attempt_starts_from_an_empty_folder(tmp_path: Path) -> None:
    """Leftovers of an attempt cut short (the daemon stopped) are removed before the next."""
    run = _vendor_run(tmp_path)
    out_dir = convert.output_dir(tmp_path / "state", 3)
    out_dir.mkdir(parents=True)
    (out_dir / "partial.mzML").write_bytes(b"<?xml version='1.0'?><mzML")
    written = convert.convert(run, _settings(), out_dir)
    assert sorted(p.name for p in out_dir.iterdir()) == [written.name]


@pytest.mark.parametrize(
    ("mode", "expected"),
    [
        ("fail", "exited with code 3: cannot read QC_0001.d: method file missing"),
        ("nothing", "wrote no mzML, mzXML or MGF file (exit code 0): no spectra in acquisition"),
        ("crash", "was killed by SIGSEGV"),
    ],
)
def test_converter_failures_are_one_line(tmp_path: Path, mode: str, expected: str) -> None:
    """Exit code and the last stderr line, the program's name, no folders, one line."""
    run = _vendor_run(tmp_path)
    with pytest.raises(convert.ConvertFailed) as info:
        convert.convert(run, _settings("--mode", mode), convert.output_dir(tmp_path, 1))
    reason = info.value.reason
    assert reason == f"converter {Path(sys.executable).name} {expected}"
    assert "\n" not in reason
    assert str(tmp_path) not in reason


def _gone(pid: int) -> bool:
    """The process has exited (no /proc entry, or a zombie waiting for its reaper)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rpartition(")")[2].split()[0]
    except (FileNotFoundError, ProcessLookupError, IndexError):
        return True
    return state == "Z"


def test_a_hanging_converter_is_killed_with_its_helpers(tmp_path: Path) -> None:
    """Past its limit the converter's whole process group is killed, its helper too."""
    run = _vendor_run(tmp_path)
    pids = tmp_path / "pids.txt"
    settings = _settings("--mode", "hang", "--pids", str(pids), timeout_s=1.0)
    with pytest.raises(convert.ConvertFailed) as info:
        convert.convert(run, settings, convert.output_dir(tmp_path, 2))
    assert info.value.reason.endswith(
        "ran past its 1 s limit and was stopped: converting (this one never ends)"
    )
    converter_pid, helper_pid = (int(x) for x in pids.read_text().split())
    wait_for(lambda: _gone(converter_pid) and _gone(helper_pid), 10.0, "converter group killed")


def test_stopping_the_daemon_kills_the_converter(tmp_path: Path) -> None:
    """A stop request during a conversion kills it and says so (the run is queued again)."""
    run = _vendor_run(tmp_path)
    pids = tmp_path / "pids.txt"
    stop = threading.Event()
    settings = _settings("--mode", "hang", "--pids", str(pids), timeout_s=600.0)
    setter = threading.Thread(
        target=lambda: (wait_for(pids.exists, 30.0, "converter started"), stop.set())
    )
    setter.start()
    with pytest.raises(convert.ConvertStopped):
        convert.convert(run, settings, convert.output_dir(tmp_path, 4), stop)
    setter.join()
    converter_pid, helper_pid = (int(x) for x in pids.read_text().split())
    wait_for(lambda: _gone(converter_pid) and _gone(helper_pid), 10.0, "converter group killed")


def test_a_converter_that_cannot_start_is_named(tmp_path: Path) -> None:
    """A program that is not there: the run's failure names it, not a crash."""
    run = _vendor_run(tmp_path)
    settings = Convert(patterns=("*.d",), command=(str(tmp_path / "no-such-converter"), "{input}"))
    with pytest.raises(convert.ConvertFailed) as info:
        convert.convert(run, settings, convert.output_dir(tmp_path, 5))
    assert info.value.reason == (
        "converter no-such-converter cannot be started: No such file or directory"
    )


def test_tree_hash_follows_content_not_place(tmp_path: Path) -> None:
    """The same run copied elsewhere hashes the same; one byte or one name changed does not."""
    first = _vendor_run(tmp_path / "a")
    second = _vendor_run(tmp_path / "b")
    assert convert.tree_sha256(first) == convert.tree_sha256(second)
    (second / "AcqData" / "MSProfile.bin").write_bytes(b"\x01\x03" + b"\x01\x02" * 998)
    assert convert.tree_sha256(first) != convert.tree_sha256(second)
    third = _vendor_run(tmp_path / "c")
    (third / "sample_info.xml").rename(third / "sample.xml")
    assert convert.tree_sha256(first) != convert.tree_sha256(third)


def test_prune_removes_only_old_converted_runs(tmp_path: Path) -> None:
    """Converted folders older than keep_days go; newer ones and anything else stay."""
    state = tmp_path / "state"
    old = convert.output_dir(state, 1)
    new = convert.output_dir(state, 2)
    other = state / convert.CONVERTED_DIR / "notes"
    for folder in (old, new, other):
        folder.mkdir(parents=True)
        (folder / "x.mzML").write_text("x")
    now_s = 2_000_000_000.0
    os.utime(old, (now_s - 91 * 86400, now_s - 91 * 86400))
    os.utime(other, (now_s - 91 * 86400, now_s - 91 * 86400))
    os.utime(new, (now_s - 89 * 86400, now_s - 89 * 86400))
    assert convert.prune(state, 90, now_s) == 1
    assert not old.exists()
    assert new.exists()
    assert other.exists()
