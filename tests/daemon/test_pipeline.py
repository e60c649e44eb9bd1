"""The measuring child: a real subprocess that measures, times out, and comes back after a kill."""

from __future__ import annotations

import threading
from typing import TYPE_CHECKING

import pytest

import synth
from watcher.config import Config, IonSpec, Limits
from watcher.daemon.pipeline import (
    MeasuringChild,
    Stopped,
    memory_limit_mb,
    sha256_file,
    time_limit_s,
)

if TYPE_CHECKING:
    from pathlib import Path


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


def test_memory_limit_stops_the_child_and_the_next_run_is_measured(
    runs: tuple[Path, Path], tmp_path: Path
) -> None:
    """An honest 800 MB array over a 300 MB address-space limit: "out of memory", then on.

    The first spectrum declares 100 million m/z values and carries them (zeros, deflated to
    ~800 kB), so the length check lets the inflate run into the child's RLIMIT_AS.
    """
    from tests.helpers import badfiles as bf

    tiny, _ = runs
    n_values = 100_000_000
    data = bf.with_first_array(
        tiny.read_bytes(), bf.deflated_zeros(8 * n_values), declared_length=n_values
    )
    huge = bf.write(tmp_path, "QC_huge_array.mzML", data)
    child = MeasuringChild()
    try:
        # A calibrant, so that MS1 arrays are decoded at all.
        tight = Config(
            calibrants=(IonSpec(name="siloxane-445", mz=445.120025),),
            limits=Limits(parse_memory_mb=300),
        )
        result = child.measure(tight, huge, huge.stat().st_size)
        limit_mb = memory_limit_mb(tight.limits, huge.stat().st_size)
        assert (result.metrics, result.error_kind) == (None, "memory")
        assert result.error == f"out of memory (limit {limit_mb} MB)"
        again = child.measure(Config(), tiny, tiny.stat().st_size)
        assert again.metrics is not None
        assert again.metrics.signal.ms1_count == 5
    finally:
        child.close()
