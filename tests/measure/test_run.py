"""Measuring a whole run: in-memory scans through measure_scans, real files through measure_file."""

from __future__ import annotations

import gzip
from datetime import UTC, datetime
from pathlib import Path

import pytest

from synth import CalibrantTruth, RunSpec, TargetTruth, write_mgf, write_mzml
from tests.helpers.refdata import REFERENCE as SHARED_REFERENCE
from tests.helpers.spectra import Analyte, Calibrant, header, make_run
from watcher.config import Config, ExpectedIon, IonSpec, Limits
from watcher.errors import ConfigError, ReadError
from watcher.measure.ions import resolve
from watcher.measure.run import NO_ARRAYS_NOTE, NO_MS1_NOTE, measure_file, measure_scans
from watcher.measure.scan import Scan

REFERENCE = SHARED_REFERENCE

# The demo scenario's calibrants and QC-mix ions (Larkfield Metabolomics Core, invented lab).
SILOXANE = IonSpec(name="siloxane-445", mz=445.120025, search_ppm=30)
LEU_ENK = IonSpec(name="leu-enk", peptide="YGGFL", charge=1, search_ppm=30)
CAFFEINE = IonSpec(name="caffeine", formula="C8H10N4O2", adduct="+H", charge=1, search_ppm=20)
MRFA = IonSpec(name="mrfa", peptide="MRFA", charge=2, search_ppm=20)
RESERPINE = IonSpec(name="reserpine", formula="C33H40N2O9", adduct="+H", search_ppm=20)
DEMO = Config(
    calibrants=(SILOXANE, LEU_ENK),
    expected_ions=(
        ExpectedIon(ion=CAFFEINE, rt_window_min=(2.0, 4.0), min_intensity=1e4),
        ExpectedIon(ion=MRFA, rt_window_min=(5.0, 7.0), min_intensity=1e4),
        ExpectedIon(ion=RESERPINE, rt_window_min=(8.0, 10.0), min_intensity=1e4),
    ),
)


def test_demo_run_measures_every_metric() -> None:
    """A QC run with both calibrants and all three QC ions yields every metric, no notes."""
    analytes = [
        Analyte(mz=resolve(spec).mz, charge=resolve(spec).charge, apex_rt_s=rt, fwhm_rt_s=8.0,
                height=5e5, m1_ratio=resolve(spec).m1_ratio_expected or 0.0)
        for spec, rt in ((CAFFEINE, 180.0), (MRFA, 360.0), (RESERPINE, 540.0))
    ]  # fmt: skip
    scans = make_run(
        duration_s=660,
        calibrants=[
            Calibrant(SILOXANE.mz or 0.0, ppm=lambda _rt: 2.0),
            Calibrant(resolve(LEU_ENK).mz, ppm=lambda _rt: 2.0),
        ],
        analytes=analytes,
    )
    metrics = measure_scans(header(), scans, DEMO, file_name="QC_0412.mzML")
    assert metrics.file == "QC_0412.mzML"
    assert metrics.format == "mzML"
    assert metrics.notes == ()
    assert [c.name for c in metrics.calibrants] == ["siloxane-445", "leu-enk"]
    assert all(c.median_ppm == pytest.approx(2.0, abs=0.05) for c in metrics.calibrants)
    assert metrics.mass_correction is not None
    # synthetic ground truth: the same +2 ppm at both m/z, so a flat line at 2 ppm
    assert metrics.mass_correction.slope_ppm_per_mz == pytest.approx(0.0, abs=1e-4)
    assert metrics.mass_correction.intercept_ppm == pytest.approx(2.0, abs=0.05)
    assert [ion.found for ion in metrics.expected_ions] == [True, True, True]
    flat = metrics.flat()
    assert flat["expected_ions.found_fraction"] == 1.0
    assert flat["signal.ms1_count"] == 330


def test_negative_mode_run_finds_deprotonated_ion_only() -> None:
    """In a negative-mode run [M-H]- caffeine is found; positive calibrant and ion not searched.

    One config serves positive and negative QC runs: the positive expected ion is None, not
    missing, and a note says why.
    """
    negative = IonSpec(name="caffeine-neg", formula="C8H10N4O2", adduct="-H", charge=-1)
    ion = resolve(negative)
    scans = make_run(
        duration_s=300,
        polarity=-1,
        analytes=[Analyte(mz=ion.mz, charge=-1, apex_rt_s=150.0, fwhm_rt_s=8.0, height=4e5)],
        calibrants=[Calibrant(resolve(CAFFEINE).mz)],  # same m/z as a positive ion would have
    )
    config = Config(
        calibrants=(CAFFEINE,),
        expected_ions=(
            ExpectedIon(ion=negative, min_intensity=1e4),
            ExpectedIon(ion=CAFFEINE, rt_window_min=(2.0, 3.0), min_intensity=1e4),
        ),
    )
    metrics = measure_scans(header(), scans, config, file_name="QC_neg_0001.mzML")
    # molmass (test_ions): caffeine [M-H]- at m/z 193.073099; scan polarity -1 throughout
    assert [i.found for i in metrics.expected_ions] == [True, None]
    assert metrics.expected_ions[0].apex_rt_s == pytest.approx(150.0, abs=2.0)
    assert str(metrics.calibrants[0].found_fraction) == "nan"  # not searched
    assert metrics.notes == (
        "expected ion caffeine: the run has no positive MS1 scans; not searched",
    )
    assert metrics.flat()["expected_ions.found_fraction"] == 1.0  # of the searched ones


def test_run_without_ms1_has_note_and_null_measures() -> None:
    """Without MS1 spectra, calibrant and XIC values are null with a note; counts remain."""
    scans = [
        Scan(index=i, ms_level=None, rt_s=float(i), tic=None, base_peak_mz=None,
             base_peak_intensity=None, precursor_charge=2)
        for i in range(4)
    ]  # fmt: skip
    metrics = measure_scans(header("MGF"), scans, DEMO, file_name="S01_0001.mgf")
    assert NO_MS1_NOTE in metrics.notes
    assert metrics.signal.ms2_count == 4
    assert metrics.signal.ms1_count == 0
    assert all(c.median_ppm is None and str(c.found_fraction) == "nan" for c in metrics.calibrants)
    # Issue 2: MGF has no MS1, so XIC metrics are null, presence included (not "missing").
    assert all(ion.found is None and ion.apex_rt_s is None for ion in metrics.expected_ions)
    assert metrics.flat()["expected_ions.found_fraction"] is None
    assert metrics.mass_correction is None


def test_ms1_without_peak_arrays_leaves_presence_unknown() -> None:
    """MS1 headers but no peak arrays: expected ions not searchable (None), with a note."""
    scans = [
        Scan(index=i, ms_level=1, rt_s=2.0 * i, tic=1e6, base_peak_mz=400.0,
             base_peak_intensity=1e5)
        for i in range(10)
    ]  # fmt: skip
    metrics = measure_scans(header(), scans, DEMO, file_name="QC_0413.mzML")
    assert NO_ARRAYS_NOTE in metrics.notes
    assert all(ion.found is None for ion in metrics.expected_ions)


def test_window_outside_the_run_is_not_found_with_a_note() -> None:
    """An RT window past the end of the run: searched, not found, and a note says why."""
    ion = resolve(CAFFEINE)
    scans = make_run(
        duration_s=120,
        analytes=[Analyte(mz=ion.mz, charge=1, apex_rt_s=60.0, fwhm_rt_s=8.0, height=5e5)],
    )
    config = Config(expected_ions=(ExpectedIon(ion=CAFFEINE, rt_window_min=(8.0, 9.0)),))
    metrics = measure_scans(header(), scans, config, file_name="QC_0414.mzML")
    assert metrics.expected_ions[0].found is False  # a run cut short must still alarm
    assert metrics.flat()["expected_ions.found_fraction"] == 0.0
    (note,) = metrics.notes
    assert "caffeine" in note
    assert "8-9 min" in note
    assert "reported not found" in note


@pytest.mark.parametrize(
    ("stamp", "expected"),
    [
        ("2026-03-02T08:00:00Z", datetime(2026, 3, 2, 8, 0, tzinfo=UTC)),
        ("2026-03-02T09:00:00+01:00", datetime(2026, 3, 2, 8, 0, tzinfo=UTC)),
        ("2026-03-02T08:00:00", datetime(2026, 3, 2, 8, 0, tzinfo=UTC)),
        (None, None),
    ],
)
def test_acquired_at_is_aware_utc(stamp: str | None, expected: datetime | None) -> None:
    """The run start time stamp becomes an aware UTC datetime; no zone is read as UTC."""
    metrics = measure_scans(header(acquired_at_iso=stamp), [], Config(), file_name="x.mzML")
    # ISO 8601 / xs:dateTime (mzML startTimeStamp): offsets convert, UTC designator Z
    assert metrics.acquired_at == expected
    if expected is not None:
        assert metrics.acquired_at is not None
        assert metrics.acquired_at.utcoffset() is not None


def test_unreadable_time_stamp_is_a_note() -> None:
    """A start time stamp that is not ISO-8601 is ignored with a note."""
    metrics = measure_scans(header(acquired_at_iso="Monday"), [], Config(), file_name="x.mzML")
    assert metrics.acquired_at is None
    assert any("Monday" in note for note in metrics.notes)


def test_bad_ion_in_config_is_config_error_naming_key() -> None:
    """An ion whose formula cannot be read raises ConfigError naming its key path."""
    bad = Config(
        source=Path("lab.yaml"),
        expected_ions=(ExpectedIon(ion=IonSpec(name="oops", formula="C8Qq")),),
    )
    with pytest.raises(ConfigError, match=r"lab\.yaml: expected_ions\[0\]: .*unknown element"):
        measure_scans(header(), [], bad, file_name="x.mzML")


# --- real files through the reader -----------------------------------------------------------


def _target(spec: IonSpec, apex_rt_s: float) -> TargetTruth:
    ion = resolve(spec)
    return TargetTruth(
        name=spec.name,
        mz=ion.mz,
        charge=ion.charge,
        m1_ratio=ion.m1_ratio_expected or 0.0,
        apex_rt_s=apex_rt_s,
        sigma_s=4.0,
        height=6e5,
        offset_ppm=1.0,
    )


def _synth_spec(*, profile: bool) -> RunSpec:
    return RunSpec(
        duration_s=660.0,
        ms1_interval_s=2.0,
        ms2_per_cycle=2,
        ms2_peaks=40,
        profile=profile,
        background_peaks=80,
        calibrants=[
            CalibrantTruth(name="siloxane-445", mz=445.120025, offset_ppm=2.0, slope_ppm_per_h=6.0),
            CalibrantTruth(name="leu-enk", mz=resolve(LEU_ENK).mz, offset_ppm=-4.5),
        ],
        targets=[
            _target(spec, rt) for spec, rt in ((CAFFEINE, 181.0), (MRFA, 361.0), (RESERPINE, 541.0))
        ],
        seed=5,
    )


@pytest.mark.parametrize(
    ("profile", "gz", "indexed", "ppm_tol"),
    [(False, False, True, 0.05), (True, True, False, 0.3)],
    ids=["centroid-indexed", "profile-gz"],
)
def test_measure_file_recovers_synthetic_truth(
    tmp_path: Path, profile: bool, gz: bool, indexed: bool, ppm_tol: float
) -> None:
    """A generated mzML run's drift, slope, counts and QC ions come back from the file."""
    path = tmp_path / ("QC_0001.mzML.gz" if gz else "QC_0001.mzML")
    truth = write_mzml(path, _synth_spec(profile=profile), indexed=indexed, gz=gz)
    calls: list[tuple[int, int]] = []
    metrics = measure_file(path, DEMO, progress=lambda done, total: calls.append((done, total)))
    # synth ground truth (RunTruth from the generator that wrote the file)
    assert metrics.format == ("mzML.gz" if gz else "mzML")
    assert metrics.signal.ms1_count == truth.ms1_count
    assert metrics.signal.ms2_count == truth.ms2_count
    assert metrics.acquired_at == truth.start_time
    for cal in metrics.calibrants:
        cal_truth = truth.calibrants[cal.name]
        assert cal.median_ppm == pytest.approx(cal_truth.median_ppm, abs=ppm_tol)
        assert cal.found_fraction == pytest.approx(cal_truth.found_fraction)
    siloxane = metrics.calibrants[0]
    assert siloxane.slope_ppm_per_h == pytest.approx(6.0, rel=0.05)
    for ion in metrics.expected_ions:
        ion_truth = truth.targets[ion.name]
        assert ion.found
        assert ion.apex_rt_s == pytest.approx(ion_truth.apex_rt_s, abs=2.0)
        assert ion.apex_intensity == pytest.approx(ion_truth.apex_height, rel=0.05)
        assert ion.fwhm_s == pytest.approx(ion_truth.fwhm_s, rel=0.15)
        assert ion.m1_ratio == pytest.approx(ion_truth.m1_ratio, rel=0.10)
    assert calls


def test_measure_file_reference_mzml_counts() -> None:
    """The mzML standard's tiny example measures 3 MS1 and 1 MS2 spectra."""
    metrics = measure_file(REFERENCE / "mzml" / "tiny.pwiz.1.1.mzML", DEMO)
    # tests/data/README.md (files.tsv): tiny.pwiz.1.1.mzML has 4 spectra, MS1=3, MS2=1
    assert metrics.signal.ms1_count == 3
    assert metrics.signal.ms2_count == 1


def test_measure_file_without_spectra_or_chromatograms_is_empty_error(tmp_path: Path) -> None:
    """An mzML with neither spectra nor chromatograms is unreadable with kind 'empty'.

    (A chromatogram-only run is a targeted run and is measured: tests/measure/test_transitions.)
    """
    source = (REFERENCE / "mzml" / "mini.chrom.mzML").read_bytes()
    # tests/data/README.md: mini.chrom.mzML holds 0 spectra; cut its chromatogram list out
    cut = source[: source.index(b"<chromatogramList")] + source[source.index(b"</run>") :]
    path = tmp_path / "empty.mzML"
    path.write_bytes(cut)
    with pytest.raises(ReadError) as caught:
        measure_file(path, DEMO)
    assert caught.value.kind == "empty"
    assert "empty.mzML" in str(caught.value)


def test_measure_file_mgf_has_no_ms1_note(tmp_path: Path) -> None:
    """An MGF run reports its spectrum count and the no-MS1 note."""
    path = tmp_path / "S01_0001.mgf"
    truth = write_mgf(path, _synth_spec(profile=False))
    metrics = measure_file(path, DEMO)
    assert metrics.format == "MGF"
    assert metrics.signal.ms1_count == 0
    assert metrics.signal.ms2_count == truth.ms2_count
    assert NO_MS1_NOTE in metrics.notes


def test_measure_file_truncated_is_error(tmp_path: Path) -> None:
    """A run cut while copying is a ReadError of kind 'truncated', never partial metrics."""
    path = tmp_path / "QC_cut.mzML"
    write_mzml(path, _synth_spec(profile=False))
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(ReadError) as caught:
        measure_file(path, DEMO)
    assert caught.value.kind == "truncated"


@pytest.mark.parametrize(
    ("damage", "reason"),
    [
        ("crc", "gzip stream is corrupt"),
        ("cut-after-spectra", "gzip stream ends early"),
    ],
)
def test_measure_file_refuses_gz_damaged_after_the_spectra(
    tmp_path: Path, damage: str, reason: str
) -> None:
    """A .gz read in one pass gives no metrics when its stream fails after the last spectrum."""
    plain = tmp_path / "QC_0002.mzML"
    write_mzml(plain, _synth_spec(profile=False), indexed=True)
    data = plain.read_bytes()
    # A wrong SHA-1 is no damage to the stream: tests/measure/readers/test_imperfect.py.
    packed = gzip.compress(data, mtime=0)
    if damage == "crc":  # RFC 1952: CRC-32 is the first 4 bytes of the 8-byte trailer
        packed = packed[:-8] + bytes([packed[-8] ^ 0xFF]) + packed[-7:]
    elif damage == "cut-after-spectra":  # the index at the end of the file is cut away
        packed = packed[:-64]
    path = tmp_path / "QC_0002.mzML.gz"
    path.write_bytes(packed)
    with pytest.raises(ReadError) as info:
        measure_file(path, DEMO)
    assert reason in info.value.reason
    assert info.value.kind == "truncated"


def test_every_failure_becomes_one_read_failure(tmp_path: Path) -> None:
    """The one mapping the measuring child and ``check`` share: a truncated file is a
    ``truncated`` failure; an empty file ``empty``; each reason is one line without the folder."""
    from watcher.measure.run import measure_or_failure
    from watcher.records import ReadFailure

    good = SHARED_REFERENCE / "mzml" / "tiny.pwiz.1.1.mzML"
    cut = tmp_path / "QC_cut.mzML"
    cut.write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    empty = tmp_path / "QC_empty.mzML"
    empty.write_bytes(b"")
    for path, kind in ((cut, "truncated"), (empty, "empty")):
        outcome = measure_or_failure(path, Config())
        assert isinstance(outcome, ReadFailure), path
        assert outcome.kind == kind
        assert "\n" not in outcome.reason
        assert str(tmp_path) not in outcome.reason
    assert not isinstance(measure_or_failure(good, Config()), ReadFailure)


def test_measure_file_stops_a_gz_at_max_inflated_mb(tmp_path: Path) -> None:
    """A .mzML.gz inflating past limits.max_inflated_mb (here 2 MB; a real run padded by 5 MiB
    inside its spectrum list) is a ReadError of kind 'too-large' naming the key; with a bound
    above its size the same file is measured."""
    plain = tmp_path / "QC_pad.mzML"
    write_mzml(plain, _synth_spec(profile=False), indexed=False)
    data = plain.read_bytes()
    at = data.index(b"<spectrumList")
    path = tmp_path / "QC_pad.mzML.gz"
    inflated = data[:at] + b" " * (5 << 20) + data[at:]
    path.write_bytes(gzip.compress(inflated, mtime=0))
    small = Config(limits=Limits(max_inflated_mb=2))
    with pytest.raises(ReadError) as info:
        measure_file(path, small)
    assert info.value.kind == "too-large"
    assert info.value.reason == (
        "too large: gzip content inflates to more than 2 MB (limits.max_inflated_mb)"
    )
    enough = Limits(max_inflated_mb=len(inflated) // (1 << 20) + 1)
    assert measure_file(path, Config(limits=enough)).signal.ms1_count > 0
