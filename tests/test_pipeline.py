"""The measuring child: a real subprocess that measures, times out, and comes back after a kill."""

from __future__ import annotations

import threading
from pathlib import Path

import pytest

import synth
from watcher.config import Config, Limits
from watcher.pipeline import MeasuringChild, Stopped, memory_limit_mb, sha256_file, time_limit_s


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    folder = tmp_path_factory.mktemp("runs")
    tiny = folder / "QC_tiny.mzML"
    synth.write_mzml(tiny, synth.RunSpec(duration_s=10, ms2_per_cycle=0, seed=1), indexed=False)
    big = folder / "QC_big.mzML"
    # About 50 MB: several tenths of a second to measure even without arrays, far over 0.05 s.
    synth.write_mzml(big, synth.RunSpec(duration_s=3600, ms2_per_cycle=3, seed=2), indexed=False)
    return tiny, big


def test_limits_scale_with_size():
    """Time limit = base + per-GB x size; memory = base MB + file size in MB."""
    limits = Limits(parse_timeout_s=300, parse_timeout_s_per_gb=300, parse_memory_mb=2048)
    assert time_limit_s(limits, 0) == 300
    assert time_limit_s(limits, 2 * 10**9) == pytest.approx(900)
    assert memory_limit_mb(limits, 512 * 1024 * 1024) == 2560


def test_sha256_matches_hashlib_of_known_bytes(tmp_path):
    """The streamed hash equals the well-known SHA-256 of b'abc' (FIPS 180-2 example)."""
    path = tmp_path / "abc"
    path.write_bytes(b"abc")
    assert sha256_file(path) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


def test_child_measures_then_times_out_then_recovers(runs):
    """One child measures a run; past the time limit it is killed; the next run gets a new one."""
    tiny, big = runs
    child = MeasuringChild()
    try:
        ok = child.measure(Config(), tiny, tiny.stat().st_size)
        assert ok.metrics is not None
        assert ok.metrics.signal.ms1_count == 5  # 10 s at one MS1 scan per 2 s (RunSpec default)
        strict = Config(limits=Limits(parse_timeout_s=0.05, parse_timeout_s_per_gb=0))
        slow = child.measure(strict, big, big.stat().st_size)
        assert (slow.metrics, slow.error_kind, slow.error) == (
            None,
            "timeout",
            "timeout after 0.05 s",
        )
        again = child.measure(Config(), tiny, tiny.stat().st_size)
        assert again.metrics is not None
    finally:
        child.close()


def test_unreadable_file_reports_reason(tmp_path):
    """A file that is not a run comes back as an error kind and reason, not an exception."""
    bad = tmp_path / "QC_bad.mzML"
    bad.write_bytes(b"this is not XML at all\n")
    child = MeasuringChild()
    try:
        result = child.measure(Config(), bad, bad.stat().st_size)
    finally:
        child.close()
    assert result.metrics is None
    assert result.error_kind is not None
    assert result.error


def test_stop_interrupts_measuring(runs):
    """A stop request during a measurement raises Stopped (the job goes back to the queue)."""
    _, big = runs
    stop = threading.Event()
    child = MeasuringChild()
    timer = threading.Timer(0.3, stop.set)
    try:
        child.measure(Config(), big, 0, stop)  # warm: start-up is not what is interrupted
        timer.start()
        with pytest.raises(Stopped):
            child.measure(Config(), big, big.stat().st_size, stop)
    finally:
        timer.cancel()
        child.close()
