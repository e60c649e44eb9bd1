"""The synthetic run generator writes valid files whose content matches its ground truth."""

from __future__ import annotations

import functools
import gc
import gzip
import hashlib
import math
import re
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import psims
import pytest
from lxml import etree
from pyteomics import mgf, mzml, mzxml

from synth import CalibrantTruth, RunSpec, TargetTruth, simulate, write_mgf, write_mzml, write_mzxml
from tests.helpers.refdata import REFERENCE as SHARED_REFERENCE

REFERENCE = SHARED_REFERENCE
XSD_DIR = Path(psims.__file__).parent / "validation" / "xsd"  # psims ships the PSI mzML XSDs
SILOXANE_MZ = 445.120025  # reference/check-ions.tsv, (C2H6SiO)6 + H+
CAFFEINE_MZ = 195.087652  # reference/check-ions.tsv, caffeine [M+H]+


def _spec(**kw: object) -> RunSpec:
    base: dict[str, object] = {
        "duration_s": 60.0,
        "ms2_per_cycle": 2,
        "background_peaks": 50,
        "calibrants": [CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=2.0)],
        "targets": [TargetTruth(name="caffeine", mz=CAFFEINE_MZ, apex_rt_s=30.0, m1_ratio=0.1032)],
    }
    base.update(kw)
    return RunSpec(**base)  # type: ignore[arg-type]


@functools.cache
def _psims_cv() -> Any:
    """psims' bundled PSI-MS CV, loaded once with remote fetching off (no network in tests)."""
    from psims.controlled_vocabulary import controlled_vocabulary as pcv

    pcv.obo_cache.use_remote = False
    with warnings.catch_warnings():
        # psims leaves its vendored .obo.gz handle to the garbage collector.
        warnings.simplefilter("ignore", ResourceWarning)
        cv = pcv.load_psims()
        gc.collect()
    return cv


def _read_mzml(path: Path) -> Any:
    return mzml.MzML(str(path), use_index=False, cv=_psims_cv())


def _cv_names() -> dict[str, str]:
    names: dict[str, str] = {}
    current: str | None = None
    with gzip.open(REFERENCE / "cv" / "psi-ms-4.1.257.obo.gz", "rt", encoding="utf-8") as fh:
        for line in fh:
            if line.startswith("id: "):
                current = line[4:].strip()
            elif line.startswith("name: ") and current is not None:
                names[current] = line[6:].strip()
                current = None
    return names


def test_mzml_opens_in_pyteomics_with_counts_levels_and_rt_of_the_truth(tmp_path: Path) -> None:
    """pyteomics reads every spectrum with the MS levels and RTs the generator reports."""
    path = tmp_path / "QC_001.mzML"
    truth = write_mzml(path, _spec())
    levels, rts = [], []
    # pyteomics is the reference reader here (its own parser, not ours).
    with _read_mzml(path) as reader:
        for spectrum in reader:
            levels.append(spectrum["ms level"])
            rts.append(float(spectrum["scanList"]["scan"][0]["scan start time"]))
    assert levels.count(1) == truth.ms1_count == 30
    assert levels.count(2) == truth.ms2_count == 60
    assert rts[0] == truth.rt_start_s
    assert max(rts) == truth.rt_end_s


@pytest.mark.parametrize(
    ("indexed", "xsd"), [(True, "mzML1.1.2_idx.xsd"), (False, "mzML1.1.0.xsd")]
)
def test_mzml_is_valid_against_the_psi_schema(tmp_path: Path, indexed: bool, xsd: str) -> None:
    """Indexed and plain output both validate against the PSI mzML 1.1 XSD (as shipped by psims)."""
    path = tmp_path / "run.mzML"
    write_mzml(path, _spec(profile=True, duration_s=10.0), indexed=indexed)
    schema = etree.XMLSchema(etree.parse(str(XSD_DIR / xsd)))
    assert schema.validate(etree.parse(str(path))), schema.error_log


def test_every_cv_accession_exists_with_its_cv_name(tmp_path: Path) -> None:
    """Each cvParam and unit uses an accession of the PSI-MS CV / UO under its CV name."""
    path = tmp_path / "run.mzML"
    write_mzml(path, _spec(duration_s=6.0, profile=True), compression="none", mz_precision=32)
    names = _cv_names()  # reference/cv/psi-ms-4.1.257.obo.gz (HUPO-PSI psi-ms-CV)
    text = path.read_text()
    pairs = set(re.findall(r'accession="(MS:\d+)" name="([^"]+)"', text))
    pairs |= set(re.findall(r'unitAccession="(MS:\d+)" unitName="([^"]+)"', text))
    assert len(pairs) > 20
    for accession, name in pairs:
        assert names.get(accession) == name, accession
    # UO names from memory (Unit Ontology: UO:0000010 second, UO:0000028 millisecond).
    units = set(re.findall(r'unitAccession="(UO:\d+)" unitName="([^"]+)"', text))
    assert units <= {
        ("UO:0000010", "second"),
        ("UO:0000028", "millisecond"),
        ("UO:0000266", "electronvolt"),
    }


def _check_index(data: bytes) -> None:
    end = data.index(b"<fileChecksum>") + len(b"<fileChecksum>")
    stored = re.search(rb"<fileChecksum>([0-9a-f]{40})</fileChecksum>", data)
    assert stored is not None
    # indexedmzML 1.1 schema documentation: SHA-1 of the file up to and including <fileChecksum>.
    assert hashlib.sha1(data[:end], usedforsecurity=False).hexdigest() == stored.group(1).decode()
    index_offset = int(re.search(rb"<indexListOffset>(\d+)<", data).group(1))  # type: ignore[union-attr]
    assert data[index_offset:].startswith(b"<indexList ")
    offsets = re.findall(rb'<offset idRef="([^"]+)">(\d+)</offset>', data)
    assert offsets
    for ref, offset in offsets:
        tag = b"<chromatogram " if ref == b"TIC" else b"<spectrum "
        assert data[int(offset) :].startswith(tag + b"index="), ref
        assert b'id="' + ref + b'"' in data[int(offset) : int(offset) + 200]


def test_index_offsets_and_checksum_are_exact(tmp_path: Path) -> None:
    """Every index offset lands on its element and the SHA-1 covers the bytes the spec says."""
    path = tmp_path / "run.mzML"
    write_mzml(path, _spec())
    _check_index(path.read_bytes())
    # PreIndexedMzML trusts the embedded offsets: random access by id must hit the right spectrum.
    with mzml.PreIndexedMzML(str(path), cv=_psims_cv()) as reader:
        assert reader.get_by_id("scan=7")["index"] == 6


def test_gzip_output_indexes_the_uncompressed_bytes(tmp_path: Path) -> None:
    """A .mzML.gz holds a complete indexed file whose offsets and SHA-1 refer to the inner bytes."""
    path = tmp_path / "run.mzML.gz"
    truth = write_mzml(path, _spec(), gz=True)
    data = gzip.decompress(path.read_bytes())
    _check_index(data)
    inner = tmp_path / "inner.mzML"
    inner.write_bytes(data)
    with _read_mzml(inner) as reader:
        assert sum(1 for _ in reader) == truth.ms1_count + truth.ms2_count


def test_centroid_calibrant_sits_at_its_true_offset(tmp_path: Path) -> None:
    """In centroid MS1 scans the calibrant peak is one point at mz * (1 + ppm / 1e6) exactly."""
    path = tmp_path / "run.mzML"
    spec = _spec(
        calibrants=[
            CalibrantTruth(
                name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=-4.5, slope_ppm_per_h=6.0
            )
        ]
    )
    truth = write_mzml(path, spec)
    cal = truth.calibrants["siloxane-445"]
    with _read_mzml(path) as reader:
        ms1 = [s for s in reader if s["ms level"] == 1]
    for spectrum, ppm_true, rt_s in zip(ms1, cal.ppm_per_scan, cal.rt_s_per_scan, strict=True):
        mz = spectrum["m/z array"]
        window = np.abs(mz - SILOXANE_MZ) / SILOXANE_MZ * 1e6 < 30
        assert window.sum() == 1
        # ppm = (observed - theoretical) / theoretical * 1e6 (DESIGN.md vocabulary, common practice)
        ppm = (mz[window][0] - SILOXANE_MZ) / SILOXANE_MZ * 1e6
        assert ppm == pytest.approx(ppm_true, abs=1e-6)
        assert ppm_true == pytest.approx(-4.5 + 6.0 * rt_s / 3600, abs=1e-9)
    assert cal.median_ppm == pytest.approx(float(np.median(cal.ppm_per_scan)))


def test_profile_peak_has_the_resolution_fwhm_and_an_apex_between_samples(tmp_path: Path) -> None:
    """A profile calibrant peak is Gaussian with FWHM = mz / R and no sample exactly at its apex."""
    path = tmp_path / "run.mzML"
    truth = write_mzml(path, _spec(profile=True, profile_resolution=20000.0))
    ppm_true = truth.calibrants["siloxane-445"].ppm_per_scan[0]
    apex_mz = SILOXANE_MZ * (1 + ppm_true * 1e-6)
    with _read_mzml(path) as reader:
        first = next(reader)
    assert first["ms level"] == 1
    assert "profile spectrum" in first
    mz, inten = first["m/z array"], first["intensity array"].astype(float)
    near = np.abs(mz - apex_mz) < 0.05
    x, y = mz[near], inten[near]
    assert np.min(np.abs(x - apex_mz)) / apex_mz * 1e6 > 0.05
    # Gaussian: ln(y) is a parabola; its curvature gives sigma; FWHM = 2.3548 sigma (textbook).
    top = y > y.max() * 0.05
    coeffs = np.polyfit(x[top] - apex_mz, np.log(y[top]), 2)
    sigma = math.sqrt(-1 / (2 * coeffs[0]))
    assert 2.3548 * sigma == pytest.approx(apex_mz / 20000.0, rel=1e-3)
    assert -coeffs[1] / (2 * coeffs[0]) == pytest.approx(0.0, abs=apex_mz * 1e-8)


def test_target_elutes_with_its_isotopes_and_ratios(tmp_path: Path) -> None:
    """At the apex scan the target shows M, M+1 and M+2 at 1.003355/z spacing and the set ratios."""
    path = tmp_path / "run.mzML"
    spec = _spec(
        targets=[TargetTruth(name="mrfa", mz=262.636121, charge=2, apex_rt_s=30.0, m1_ratio=0.2885)]
    )
    truth = write_mzml(path, spec)
    tgt = truth.targets["mrfa"]
    assert tgt.fwhm_s == pytest.approx(2.3548 * 6.0)
    with _read_mzml(path) as reader:
        ms1 = [s for s in reader if s["ms level"] == 1]
    apex = next(
        s
        for s in ms1
        if float(s["scanList"]["scan"][0]["scan start time"]) == tgt.sampled_apex_rt_s
    )
    mz, inten = apex["m/z array"], apex["intensity array"]

    def at(target_mz: float) -> float:
        hit = np.abs(mz - target_mz) < 1e-6
        assert hit.sum() == 1
        return float(inten[hit][0])

    # 13C-12C spacing 1.003355 u (NIST isotope masses, reference/masses.tsv), divided by z.
    m0, m1 = at(262.636121), at(262.636121 + 1.003355 / 2)
    assert m0 == pytest.approx(tgt.sampled_apex_height, rel=1e-6)  # float32 intensities
    assert m1 / m0 == pytest.approx(0.2885, rel=1e-6)
    assert at(262.636121 + 2 * 1.003355 / 2) / m0 == pytest.approx(0.01, rel=1e-6)


def test_dropout_lowers_tic_by_its_factor(tmp_path: Path) -> None:
    """MS1 scans inside a dropout window carry the factor times the usual TIC."""
    truth = simulate(_spec(dropouts=[(20.0, 30.0, 0.05)], targets=[]))
    tic = np.asarray(truth.ms1_tic)
    rt = np.asarray(truth.ms1_rt_s)
    inside = (rt >= 20) & (rt < 30)
    assert inside.sum() == 5
    assert np.median(tic[inside]) / np.median(tic[~inside]) == pytest.approx(0.05, rel=0.2)


def test_same_seed_same_bytes_other_seed_other_bytes(tmp_path: Path) -> None:
    """Generation is reproducible from the seed."""
    for sub in "abc":
        (tmp_path / sub).mkdir()
    a, b, c = (tmp_path / sub / "run.mzML" for sub in "abc")
    write_mzml(a, _spec(seed=3))
    write_mzml(b, _spec(seed=3))
    write_mzml(c, _spec(seed=4))
    assert a.read_bytes() == b.read_bytes()
    assert a.read_bytes() != c.read_bytes()


def test_uncompressed_32_bit_arrays_decode_to_the_same_run(tmp_path: Path) -> None:
    """compression='none' and mz_precision=32 give the same peaks within float32 rounding."""
    a, b = tmp_path / "a.mzML", tmp_path / "b.mzML"
    write_mzml(a, _spec())
    write_mzml(b, _spec(), compression="none", mz_precision=32)
    with _read_mzml(a) as ra, _read_mzml(b) as rb:
        for sa, sb in zip(ra, rb, strict=True):
            np.testing.assert_allclose(sa["m/z array"], sb["m/z array"], rtol=1e-7)
    assert "MS:1000576" in b.read_text()


def test_mzxml_reads_back_with_sha1_index_and_precursors(tmp_path: Path) -> None:
    """mzXML output opens in pyteomics; its index offsets hit <scan and its sha1 matches."""
    path = tmp_path / "run.mzXML"
    truth = write_mzxml(path, _spec())
    data = path.read_bytes()
    end = data.index(b"<sha1>") + len(b"<sha1>")
    stored = re.search(rb"<sha1>([0-9a-f]{40})</sha1>", data)
    assert stored is not None
    assert hashlib.sha1(data[:end], usedforsecurity=False).hexdigest() == stored.group(1).decode()
    for num, offset in re.findall(rb'<offset id="(\d+)">(\d+)</offset>', data):
        assert data[int(offset) :].startswith(b'<scan num="' + num + b'"')
    with mzxml.read(str(path)) as reader:
        scans = list(reader)
    assert [s["msLevel"] for s in scans].count(1) == truth.ms1_count
    ms1 = scans[0]
    cal_ppm = truth.calibrants["siloxane-445"].ppm_per_scan[0]
    hit = np.abs(ms1["m/z array"] - SILOXANE_MZ) < 0.01
    assert (ms1["m/z array"][hit][0] - SILOXANE_MZ) / SILOXANE_MZ * 1e6 == pytest.approx(cal_ppm)
    charges = {int(s["precursorMz"][0]["precursorCharge"]) for s in scans if s["msLevel"] == 2}
    assert charges <= {1, 2, 3}


def test_mgf_holds_every_ms2_spectrum_and_only_those(tmp_path: Path) -> None:
    """MGF output has one BEGIN/END block per MS2 scan with precursor, charge and RT."""
    path = tmp_path / "run.mgf"
    truth = write_mgf(path, _spec())
    with mgf.read(str(path)) as reader:
        spectra = list(reader)
    assert len(spectra) == truth.ms2_count
    text = path.read_text()
    assert text.count("BEGIN IONS") == text.count("END IONS") == truth.ms2_count
    counted: dict[int, int] = {}
    for s in spectra:
        charge = int(s["params"]["charge"][0])
        counted[charge] = counted.get(charge, 0) + 1
        assert s["params"]["rtinseconds"] > 0
    assert counted == truth.precursor_charges


def test_naive_start_time_is_refused() -> None:
    """A RunSpec with a naive datetime is an error, not a silent local time."""
    from datetime import datetime

    with pytest.raises(ValueError, match="timezone-aware"):
        RunSpec(start_time=datetime(2026, 1, 1))  # noqa: DTZ001
