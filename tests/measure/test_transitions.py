"""Targeted runs measured end to end (measure_file): transitions against synthetic SRM runs with
exact truth (synth/srm.py), the example chromatogram files, and the signal of a run without
spectra from its TIC chromatogram.

Truth of a Gaussian peak (common practice): area = height x sigma x sqrt(2 pi), FWHM =
2 sqrt(2 ln 2) sigma. The area is integrated between the 1 %-of-apex crossings, which hold
erf(3.035 / sqrt 2) = 99.76 % of a Gaussian's area; the synthetic baseline adds ~0.2 %, so areas
are checked to 1 %.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np
import pytest
from pyteomics import mzml as pyteomics_mzml

from synth import RunSpec, TargetTruth, write_mzml
from synth.srm import SrmSpec, SrmTransition, write_srm_mzml
from tests.helpers.refdata import REFERENCE
from watcher.config import Config, ExpectedIon, IonSpec
from watcher.measure.readers.cv import load_cv
from watcher.measure.run import TARGETED_NOTE, measure_file

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.records import ExpectedIonResult, RunMetrics

QUANT = SrmTransition(
    name="tyr-quant", precursor_mz=182.1, product_mz=136.1, apex_rt_s=150.0, height=6e5, sigma_s=4.0
)
QUAL = SrmTransition(
    name="tyr-qual",
    precursor_mz=182.1,
    product_mz=165.1,
    apex_rt_s=150.0,
    height=1.5e5,
    sigma_s=4.0,
)
LATE = SrmTransition(
    name="phe-quant", precursor_mz=166.1, product_mz=120.1, apex_rt_s=320.0, height=2e5, sigma_s=6.0
)
LOST = SrmTransition(
    name="trp-quant",
    precursor_mz=205.1,
    product_mz=188.1,
    apex_rt_s=260.0,
    height=1e5,
    sigma_s=5.0,
    present=False,
)


def _transition(t: SrmTransition, **kwargs: Any) -> ExpectedIon:
    return ExpectedIon(
        ion=IonSpec(name=t.name, mz=t.precursor_mz), product_mz=t.product_mz, **kwargs
    )


def _config(*ions: ExpectedIon, calibrants: tuple[IonSpec, ...] = ()) -> Config:
    return Config(calibrants=calibrants, expected_ions=ions)


def _run(tmp_path: Path, config: Config, **spec: Any) -> tuple[RunMetrics, Any]:
    srm = SrmSpec(transitions=(QUANT, QUAL, LATE, LOST), duration_s=480.0, **spec)
    path = tmp_path / "SRM_amino_01.mzML"
    truth = write_srm_mzml(path, srm)
    return measure_file(path, config), truth


def _ion(metrics: RunMetrics, name: str) -> ExpectedIonResult:
    return next(ion for ion in metrics.expected_ions if ion.name == name)


@pytest.mark.parametrize(
    "options",
    [{}, {"time_unit": "minute", "compression": "zlib"}, {"indexed": True, "tic": False}],
    ids=["plain", "minutes-zlib", "indexed-no-tic"],
)
def test_transitions_match_the_synthetic_truth(tmp_path: Path, options: dict[str, Any]) -> None:
    """Apex RT, height, FWHM and area of every written transition; the left-out one missing."""
    config = _config(*(_transition(t) for t in (QUANT, QUAL, LATE, LOST)))
    metrics, truth = _run(tmp_path, config, **options)
    assert truth.missing == ("trp-quant",)
    for t in (QUANT, QUAL, LATE):
        ion = _ion(metrics, t.name)
        assert ion.found is True
        assert ion.apex_rt_s == pytest.approx(t.apex_rt_s, abs=0.05)
        # baseline 100 counts under the peak (SrmSpec default); float32 intensities
        assert ion.apex_intensity == pytest.approx(t.height + 100.0, rel=1e-3)
        assert ion.fwhm_s == pytest.approx(t.fwhm_s, rel=0.01)
        assert ion.area == pytest.approx(t.area, rel=0.01)
        assert ion.ppm is None
    lost = _ion(metrics, "trp-quant")
    assert lost.found is False
    assert lost.area is None
    assert any("trp-quant" in note and "reported not found" in note for note in metrics.notes)
    assert metrics.flat()["expected_ions.missing_count"] == 1.0


def test_ion_ratio_and_its_deviation(tmp_path: Path) -> None:
    """qual/quant area ratio = (1.5e5 x 4) / (6e5 x 4) = 0.25 (the truth's areas); 0.3 expected
    reads -16.7 %."""
    config = _config(
        _transition(QUANT),
        _transition(QUAL, ratio_to="tyr-quant", expected_ratio=0.3),
        _transition(LATE, ratio_to="trp-quant"),  # its partner is missing: no ratio
    )
    metrics, _truth = _run(tmp_path, config)
    qual = _ion(metrics, "tyr-qual")
    assert qual.ion_ratio == pytest.approx(QUAL.area / QUANT.area, rel=0.005)
    assert qual.ion_ratio_deviation_pct == pytest.approx((0.25 / 0.3 - 1) * 100, abs=0.5)
    assert metrics.flat()["expected_ion.tyr-qual.ion_ratio"] == qual.ion_ratio
    late = _ion(metrics, "phe-quant")
    assert late.found is True
    assert late.ion_ratio is None


def test_found_false_below_min_intensity_or_outside_the_window(tmp_path: Path) -> None:
    """A peak lower than min_intensity, or a window without the peak: found false."""
    config = _config(
        _transition(QUANT, min_intensity=1e6),  # apex 6e5
        _transition(QUAL, rt_window_min=(5.0, 7.0)),  # apex at 2.5 min
        _transition(LATE, rt_window_min=(5.0, 6.0)),  # apex at 5.33 min: inside
        _transition(LOST, rt_window_min=(10.0, 12.0)),  # run ends at 8 min
    )
    metrics, _truth = _run(tmp_path, config)
    assert _ion(metrics, "tyr-quant").found is False
    assert _ion(metrics, "tyr-quant").apex_intensity == pytest.approx(6e5 + 100, rel=1e-3)
    qual = _ion(metrics, "tyr-qual")
    assert qual.found is False  # the window holds only the flat baseline: no peak
    assert qual.apex_intensity is None or qual.apex_intensity < 200
    assert _ion(metrics, "phe-quant").found is True
    assert _ion(metrics, "trp-quant").found is False


def test_tolerance_tells_neighbouring_transitions_apart(tmp_path: Path) -> None:
    """Precursor 182.1 with product 165.6: within 0.5 of 165.1 only with tolerance_mz 0.6."""
    near = SrmTransition(
        name="near", precursor_mz=182.1, product_mz=165.6, apex_rt_s=0.0, height=1.0, sigma_s=1.0
    )
    tight = _config(_transition(near, tolerance_mz=0.4))
    loose = _config(_transition(near, tolerance_mz=0.6))
    assert _ion(_run(tmp_path, tight)[0], "near").found is False
    metrics, _truth = _run(tmp_path, loose)
    assert _ion(metrics, "near").apex_rt_s == pytest.approx(QUAL.apex_rt_s, abs=0.05)


def test_signal_of_a_run_without_spectra_comes_from_its_tic(tmp_path: Path) -> None:
    """TIC median, RT range and a spray failure from the TIC chromatogram (synth truth);
    calibrants null with the note; spectrum ions not searched."""
    config = _config(
        _transition(QUANT),
        ExpectedIon(ion=IonSpec(name="caffeine", formula="C8H10N4O2")),
        calibrants=(IonSpec(name="lock", mz=556.2766),),
    )
    # A steady TIC (as many transitions give): 2e4 counts of baseline under each transition
    metrics, truth = _run(tmp_path, config, dropout=(400.0, 440.0, 0.01), baseline=2e4)
    signal = metrics.signal
    assert signal.ms1_count == 0
    assert signal.ms2_count == 0
    assert signal.tic_median == pytest.approx(truth.tic_median, rel=1e-6)  # float32 values
    assert signal.rt_start_s == pytest.approx(truth.tic_time_s[0])
    assert signal.rt_end_s == pytest.approx(truth.tic_time_s[-1])
    assert signal.dropouts == 1
    assert signal.longest_dropout_s == pytest.approx(40.0, abs=0.5)  # 400-440 s, 0.5 s cycle
    assert signal.bpi_median is None
    assert metrics.calibrants[0].median_ppm is None
    assert TARGETED_NOTE in metrics.notes
    assert _ion(metrics, "caffeine").found is None


def test_summed_transitions_stand_in_for_a_missing_tic(tmp_path: Path) -> None:
    """Without a TIC chromatogram the per-cycle sum of the transitions is the signal: its median
    is the written traces' summed baseline (3 transitions x 2e4 counts; the peaks are short)."""
    metrics, truth = _run(tmp_path, _config(_transition(QUANT)), tic=False, baseline=2e4)
    assert truth.tic == []
    assert metrics.signal.tic_median == pytest.approx(6e4, rel=0.01)
    assert metrics.signal.dropouts == 0


def _pyteomics_chromatograms(path: Path) -> list[dict[str, Any]]:
    with pyteomics_mzml.MzML(str(path), use_index=False, cv=load_cv()) as reader:
        return list(reader.iterfind("chromatogram"))


def test_example_srm_file_transitions(tmp_path: Path) -> None:
    """mini.chrom.mzML (pymzML, MIT): its three transitions found where pyteomics puts their
    highest point, areas equal to the trapezoid of pyteomics' arrays over the same bounds."""
    path = REFERENCE / "mzml" / "mini.chrom.mzML"
    entries = _pyteomics_chromatograms(path)
    ions = []
    for i, entry in enumerate(entries):
        precursor = entry["precursor"][0]["isolationWindow"]["isolation window target m/z"]
        product = entry["product"][0]["isolationWindow"]["isolation window target m/z"]
        ions.append(
            ExpectedIon(
                ion=IonSpec(name=f"t{i}", mz=precursor), product_mz=product, tolerance_mz=0.001
            )
        )
    metrics = measure_file(path, _config(*ions))
    assert TARGETED_NOTE in metrics.notes
    for i, entry in enumerate(entries):
        ion = _ion(metrics, f"t{i}")
        time_s, height = entry["time array"], entry["intensity array"]  # seconds in this file
        top = int(np.argmax(height))
        assert ion.found is True
        # a fitted apex lies within the samples at or above half the top point's height
        above = time_s[height >= height[top] / 2]
        assert above.min() <= ion.apex_rt_s <= above.max()
        assert ion.area is not None
        assert 0 < ion.area <= float(np.trapezoid(height, time_s)) * (1 + 1e-9)


def test_spectrum_file_with_a_transition_chromatogram(tmp_path: Path) -> None:
    """tiny.pwiz.1.1.mzML: spectra measured as before (3 MS1, 1 MS2, files.tsv) and the SIC
    456.7 -> 678.9 as a transition; its ramp 10, 9, ..., 1 at 0-9 s never falls to 1 % of the
    apex, so its area is the trapezoid of the whole trace (computed from pyteomics' arrays)."""
    path = REFERENCE / "mzml" / "tiny.pwiz.1.1.mzML"
    sic = next(e for e in _pyteomics_chromatograms(path) if e["id"] == "sic")
    config = _config(ExpectedIon(ion=IonSpec(name="sic", mz=456.7), product_mz=678.9))
    metrics = measure_file(path, config)
    assert (metrics.signal.ms1_count, metrics.signal.ms2_count) == (3, 1)
    ion = _ion(metrics, "sic")
    assert ion.found is True
    assert ion.area == pytest.approx(float(np.trapezoid(sic["intensity array"], sic["time array"])))
    assert TARGETED_NOTE not in metrics.notes


def test_transitions_in_a_full_scan_run_are_not_searched(tmp_path: Path) -> None:
    """A run with spectra and only a TIC chromatogram (synth LC-MS): transitions None + a note,
    not "missing" (a lab's config covers both kinds of run)."""
    path = tmp_path / "QC_fullscan.mzML"
    write_mzml(
        path,
        RunSpec(
            duration_s=60.0,
            targets=[TargetTruth(name="caffeine", mz=195.087652, apex_rt_s=30.0, sigma_s=3.0)],
            seed=3,
        ),
    )
    metrics = measure_file(path, _config(_transition(QUANT)))
    assert _ion(metrics, "tyr-quant").found is None
    assert any("no transition chromatograms" in note for note in metrics.notes)
    assert metrics.signal.ms1_count > 0
    assert not math.isnan(metrics.signal.tic_median or math.nan)
