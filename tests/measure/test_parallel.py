"""Reading one indexed mzML in blocks on several processes gives exactly one pass's metrics.

The reference is the project's own one-pass reader on the same file (the issue "Faster to the
first alert" asks for results identical to one worker's on every synthetic and example file);
the example files are HUPO-PSI's and pyteomics' (tests/data/README.md), the synthetic runs
come from synth/ with known calibrant drift and expected ions.
"""

from __future__ import annotations

import dataclasses
import itertools
import json
import shutil
from typing import TYPE_CHECKING

import pytest

from synth import CalibrantTruth, RunSpec, TargetTruth, write_mzml
from tests.helpers import badfiles as bf
from tests.helpers.refdata import REFERENCE
from watcher.config import Config, ExpectedIon, IonSpec, Limits
from watcher.errors import ReadError
from watcher.measure import parallel
from watcher.measure.readers.mzml_blocks import block_bounds
from watcher.measure.run import measure_file

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.records import RunMetrics

# The demo scenario's ions (invented lab): m/z of siloxane from memory (common practice, the
# protonated polysiloxane background ion at m/z 445.1200), caffeine [M+H]+ from its formula.
SILOXANE = IonSpec(name="siloxane-445", mz=445.120025, search_ppm=30)
CAFFEINE = IonSpec(name="caffeine", formula="C8H10N4O2", adduct="+H", charge=1, search_ppm=20)
CONFIG = Config(
    calibrants=(SILOXANE,),
    expected_ions=(ExpectedIon(ion=CAFFEINE, rt_window_min=(1.0, 4.0), min_intensity=1e4),),
)
CAFFEINE_MZ = 195.087652  # C8H10N4O2 + H+, from NIST masses (molmass gives the same)
EXAMPLES = ("example.mzML", "test.mzML", "tiny.pwiz.1.1.mzML")  # the indexed example files


def _serial(path: Path, config: Config = CONFIG) -> RunMetrics:
    one = dataclasses.replace(config, limits=dataclasses.replace(config.limits, workers=1))
    return measure_file(path, one)


def _same(a: RunMetrics, b: RunMetrics) -> None:
    # JSON text compares NaN equal to NaN, and every float bit for bit (repr round-trips).
    assert json.dumps(a.to_dict(), sort_keys=True) == json.dumps(b.to_dict(), sort_keys=True)


def _synthetic(path: Path, *, duration_s: float, seed: int, profile: bool = False) -> Path:
    spec = RunSpec(
        duration_s=duration_s,
        profile=profile,
        seed=seed,
        calibrants=[
            CalibrantTruth(name="siloxane-445", mz=445.120025, offset_ppm=2.0, jitter_ppm=0.4)
        ],
        targets=[TargetTruth(name="caffeine", mz=CAFFEINE_MZ, apex_rt_s=150.0, height=5e5)],
    )
    write_mzml(path, spec)
    return path


@pytest.mark.parametrize("workers", [2, 3, 4])
@pytest.mark.parametrize("name", EXAMPLES)
def test_example_files_in_blocks_equal_one_pass(tmp_path: Path, name: str, workers: int) -> None:
    """Each indexed example, its offset index recomputed (two of them carry indexes that the
    reader distrusts, tests/data/README.md, and then reads them by streaming: no blocks)."""
    path = bf.write(tmp_path, name, bf.reindexed((REFERENCE / "mzml" / name).read_bytes()))
    blocks = parallel.measure_in_blocks(
        path, CONFIG, workers=workers, min_bytes=0, min_spectra_per_block=1
    )
    assert blocks is not None
    _same(blocks, _serial(path))


def test_an_index_the_reader_distrusts_gives_no_blocks(tmp_path: Path) -> None:
    """example.mzML as published: its index entries carry an attribute outside the schema,
    so the one-pass reader streams it; the blocks do not start."""
    path = tmp_path / "example.mzML"
    shutil.copy(bf.EXAMPLE, path)
    assert block_bounds(path, 2, min_spectra_per_block=1) is None


@pytest.mark.parametrize("profile", [False, True])
@pytest.mark.parametrize("workers", [2, 3])
def test_synthetic_runs_in_blocks_equal_one_pass(
    tmp_path: Path, workers: int, profile: bool
) -> None:
    path = _synthetic(tmp_path / "QC_blocks.mzML", duration_s=300, seed=5, profile=profile)
    blocks = parallel.measure_in_blocks(path, CONFIG, workers=workers, min_bytes=0)
    assert blocks is not None
    serial = _serial(path)
    _same(blocks, serial)
    # And both are right: the true offset is +2 ppm, the ion is found near its apex.
    assert serial.calibrants[0].median_ppm == pytest.approx(2.0, abs=0.3)
    assert serial.expected_ions[0].found


def test_blocks_cover_every_spectrum_once_in_order(tmp_path: Path) -> None:
    path = _synthetic(tmp_path / "QC_bounds.mzML", duration_s=300, seed=6)
    for blocks in (2, 3, 4, 7):
        bounds = block_bounds(path, blocks)
        assert bounds is not None
        assert bounds[0][0] == 0
        assert all(a[1] == b[0] for a, b in itertools.pairwise(bounds))
        assert all(first < stop for first, stop in bounds)
        assert len(bounds) == blocks


def test_files_that_are_not_indexed_mzml_are_read_in_one_pass(tmp_path: Path) -> None:
    """Non-indexed mzML, .mzML.gz, mzXML and MGF: no blocks (None), one pass instead."""
    plain = tmp_path / "plain.mzML"
    shutil.copy(bf.PLAIN, plain)
    gz = tmp_path / "run.mzML.gz"
    gz.write_bytes(bf.gz(bf.EXAMPLE.read_bytes()))
    for path in (plain, gz, bf.MZXML, bf.MGF):
        assert block_bounds(path, 2, min_spectra_per_block=1) is None, path.name


def test_a_damaged_spectrum_in_a_block_gives_the_one_pass_error(tmp_path: Path) -> None:
    """A spectrum whose zlib stream is broken: the blocks give up (None) and measure_file,
    with workers, reports exactly the one-pass error."""
    path = bf.write(tmp_path, "QC_bad_zlib.mzML", bf.bad_zlib(bf.EXAMPLE.read_bytes()))
    assert (
        parallel.measure_in_blocks(path, CONFIG, workers=2, min_bytes=0, min_spectra_per_block=1)
        is None
    )
    with pytest.raises(ReadError) as serial:
        _serial(path)
    parallel_config = dataclasses.replace(CONFIG, limits=Limits(workers=2))
    with pytest.raises(ReadError) as in_blocks:
        measure_file(path, parallel_config)
    assert str(in_blocks.value) == str(serial.value)


@pytest.mark.slow
def test_a_large_run_through_measure_file_with_workers_equals_one_pass(tmp_path: Path) -> None:
    """Above the size where blocks pay (32 MB), measure_file with limits.workers 2 takes the
    block path and gives one pass's metrics."""
    path = _synthetic(tmp_path / "QC_large.mzML", duration_s=2400, seed=9)
    assert path.stat().st_size > parallel.MIN_PARALLEL_BYTES
    two = dataclasses.replace(CONFIG, limits=Limits(workers=2))
    assert parallel.measure_in_blocks(path, two, workers=2) is not None
    _same(measure_file(path, two), _serial(path))


def test_worker_count_auto_is_the_cores_at_most_four() -> None:
    assert 1 <= parallel.worker_count(0) <= parallel.MAX_AUTO_WORKERS
    assert parallel.worker_count(3) == 3
