"""mzML chromatograms read by open_run: every example file's chromatograms against chromatograms.tsv
and against pyteomics (an independent reader from the registry), synthetic SRM runs with
known truth, and damaged chromatogram arrays as one-line errors naming the chromatogram.
"""

from __future__ import annotations

from collections import defaultdict
from typing import TYPE_CHECKING, Any

import numpy as np
import pytest
from pyteomics import mzml as pyteomics_mzml

from synth.srm import SrmSpec, SrmTransition, write_srm_mzml
from tests.helpers.badfiles import REFERENCE, tsv_rows, write
from watcher.errors import ReadError
from watcher.measure import chromatogram as kinds
from watcher.measure.readers.cv import load_cv
from watcher.measure.readers.read import ChromatogramWish, open_run

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.measure.chromatogram import Chromatogram

ROWS = tsv_rows("chromatograms.tsv")
FILES = sorted({row["file"] for row in ROWS})
_TO_S = {"second": 1.0, "minute": 60.0}  # chromatograms.tsv writes times in the file's unit


def _chromatograms(path: Path, *, with_spectra: bool = True) -> tuple[int, list[Chromatogram]]:
    got: list[Chromatogram] = []
    with open_run(path, chromatograms=ChromatogramWish(got.append, with_spectra=with_spectra)) as (
        _header,
        scans,
    ):
        n_scans = sum(1 for _ in scans)
    return n_scans, got


def _pyteomics(path: Path) -> list[dict[str, Any]]:
    # The PSI-MS CV handed over loaded (psims' own loader leaves its file open)
    with pyteomics_mzml.MzML(str(path), use_index=False, cv=load_cv()) as reader:
        return list(reader.iterfind("chromatogram"))


def _target(entry: dict[str, Any], part: str) -> float | None:
    items = entry.get(part)
    if not items:
        return None
    return float(items[0]["isolationWindow"]["isolation window target m/z"])


@pytest.mark.parametrize("name", FILES)
def test_example_chromatograms_match_the_table_and_pyteomics(name: str) -> None:
    """Counts, ids, points, first/last time (s), sums and maxima as chromatograms.tsv measured;
    count, ids and isolation targets as pyteomics 5 reads them."""
    path = REFERENCE / name
    _n, got = _chromatograms(path)
    rows = [r for r in ROWS if r["file"] == name]
    independent = _pyteomics(path)
    assert len(got) == len(rows) == len(independent)
    for ours, row, theirs in zip(got, rows, independent, strict=True):
        assert ours.id == row["id"] == theirs["id"]
        assert ours.time_s.size == int(row["n_points"])
        factor = _TO_S[row["time_unit"]]
        assert ours.time_s[0] == pytest.approx(float(row["first_time"]) * factor, rel=1e-9)
        assert ours.time_s[-1] == pytest.approx(float(row["last_time"]) * factor, rel=1e-9)
        # float32 intensities summed in float64 here, in float32 there: 1e-6 relative
        assert ours.intensity.sum() == pytest.approx(float(row["sum_intensity"]), rel=1e-6)
        assert ours.intensity.max() == pytest.approx(float(row["max_intensity"]), rel=1e-6)
        assert ours.precursor_mz == _target(theirs, "precursor")
        assert ours.product_mz == _target(theirs, "product")
        kind = {"total ion current chromatogram": kinds.TIC}.get(row["type"])
        assert (ours.kind == kinds.TIC) == (kind == kinds.TIC)


def test_transition_counts_match_pyteomics() -> None:
    """Per file, the chromatograms with a precursor and a product target (transitions), as
    pyteomics finds them: 3 in mini.chrom, 1 in mini_numpress.chrom, 1 (the SIC) in tiny.pwiz."""
    ours: dict[str, int] = defaultdict(int)
    theirs: dict[str, int] = defaultdict(int)
    for name in FILES:
        _n, got = _chromatograms(REFERENCE / name)
        ours[name] = sum(c.is_transition for c in got)
        theirs[name] = sum(
            1
            for entry in _pyteomics(REFERENCE / name)
            if _target(entry, "precursor") is not None and _target(entry, "product") is not None
        )
    assert ours == theirs
    assert ours["mzml/mini.chrom.mzML"] == 3  # tests/data/README.md: 3 SRM chromatograms


def test_numpress_chromatogram_reads_by_accession() -> None:
    """The Numpress sample (names say linear, the intensity accession says pic) reads to the
    table's values; pyteomics reads it wrongly (chromatograms.tsv, pyteomics_first_values)."""
    row = next(r for r in ROWS if "numpress" in r["file"])
    _n, (chrom,) = _chromatograms(REFERENCE / row["file"])
    assert chrom.kind == kinds.SRM
    assert chrom.intensity.sum() == pytest.approx(float(row["sum_intensity"]), rel=1e-12)
    assert chrom.intensity.max() == pytest.approx(float(row["max_intensity"]), rel=1e-12)


def test_spectrum_runs_skip_chromatograms_unless_asked() -> None:
    """Without ``with_spectra`` a spectrum run's chromatograms are not read (the spectrum pass
    costs what it did); a chromatogram-only run's always are."""
    n_scans, got = _chromatograms(REFERENCE / "mzml" / "example.mzML", with_spectra=False)
    assert n_scans == 11  # files.tsv
    assert got == []
    n_scans, got = _chromatograms(REFERENCE / "mzml" / "mini.chrom.mzML", with_spectra=False)
    assert n_scans == 0
    assert len(got) == 3


def _spec(**kwargs: Any) -> SrmSpec:
    return SrmSpec(
        transitions=(
            SrmTransition(
                name="a",
                precursor_mz=609.3,
                product_mz=195.1,
                apex_rt_s=120.0,
                height=8e4,
                sigma_s=3.0,
            ),
            SrmTransition(
                name="b",
                precursor_mz=609.3,
                product_mz=397.2,
                apex_rt_s=120.0,
                height=3e4,
                sigma_s=3.0,
            ),
            SrmTransition(
                name="c",
                precursor_mz=400.0,
                product_mz=200.0,
                apex_rt_s=60.0,
                height=1e4,
                sigma_s=3.0,
                present=False,
            ),
        ),
        duration_s=240.0,
        **kwargs,
    )


@pytest.mark.parametrize(
    "options",
    [
        {},
        {"time_unit": "minute", "compression": "zlib"},
        {"indexed": True, "tic": False},
    ],
    ids=["plain", "minutes-zlib", "indexed-no-tic"],
)
def test_synthetic_srm_run_reads_as_written(tmp_path: Path, options: dict[str, Any]) -> None:
    """Each written trace comes back with its targets, times in seconds and values (synth truth)."""
    spec = _spec(**options)
    truth = write_srm_mzml(tmp_path / "SRM_01.mzML", spec)
    _n, got = _chromatograms(tmp_path / "SRM_01.mzML")
    assert len(got) == truth.chromatogram_count
    transitions = [c for c in got if c.is_transition]
    assert [c.product_mz for c in transitions] == [195.1, 397.2]  # "c" was left out
    assert (got[0].kind == kinds.TIC) == spec.tic
    for chrom in transitions:
        assert chrom.time_s[-1] == pytest.approx(spec.duration_s - spec.cycle_s, abs=spec.cycle_s)
        assert np.all(np.diff(chrom.time_s) > 0)


def test_damaged_chromatogram_array_names_the_chromatogram(tmp_path: Path) -> None:
    """A chromatogram whose intensity array is cut short: ReadError naming the file and the
    chromatogram (index and id), one line."""
    source = (REFERENCE / "mzml" / "mini.chrom.mzML").read_bytes()
    start = source.index(b"<binary>", source.index(b'id="4092_IEVLDYQAGDEAGIK/2_y7"'))
    start = source.index(b"<binary>", start + 1)  # the second array: intensities
    damaged = source[: start + 8] + source[start + 20 :]
    path = write(tmp_path, "SRM_bad.mzML", damaged)
    with pytest.raises(ReadError) as caught:
        _chromatograms(path)
    text = str(caught.value)
    assert "SRM_bad.mzML" in text
    assert "chromatogram 1 (4092_IEVLDYQAGDEAGIK/2_y7)" in text
    assert "\n" not in text


def test_unknown_time_unit_is_an_error(tmp_path: Path) -> None:
    """A time array in m/z units (a writer's slip) is refused, not read as seconds."""
    source = (REFERENCE / "mzml" / "mini.chrom.mzML").read_bytes()
    damaged = source.replace(b'unitAccession="UO:0000010"', b'unitAccession="MS:1000040"', 1)
    assert damaged != source
    path = write(tmp_path, "SRM_unit.mzML", damaged)
    with pytest.raises(ReadError, match="is not a unit of time"):
        _chromatograms(path)
