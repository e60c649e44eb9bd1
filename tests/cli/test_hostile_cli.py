"""Hostile use of ``ionwarden check``, ``validate`` and ``run``: odd runs, odd paths, odd configs.

Every case goes through the real command line in a subprocess. The odd runs are made by the
project's generator (``synth``) with its scans edited on the way to the writer, so the truth of
the untouched parts stays known. Expected: never a traceback, a one-line reason naming the file,
the exit codes of ``watcher/cli/main.py``, and the other files of the call still measured.
"""

from __future__ import annotations

import gzip
import json
import os
import subprocess
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from molmass import Formula

import synth.mzml as synth_mzml
from synth import CalibrantTruth, RunSpec, RunTruth, TargetTruth, write_mgf, write_mzml
from synth.model import SynthScan
from tests.helpers.cli import Result, run_cli

ROOT = Path(__file__).resolve().parents[2]
SILOXANE_MZ = 445.120025  # reference/check-ions.tsv, [C12H37O6Si6]+ (molmass 445.1200245)
LEU_ENK_MZ = 556.276575  # reference/check-ions.tsv, leucine enkephalin YGGFL [M+H]+
CAFFEINE_MZ = 195.087652  # reference/check-ions.tsv, caffeine [M+H]+
# taurine [M-H]-, [C2H6NO3S]-: molmass Formula(...).monoisotopic_mass (electron mass included)
TAURINE_MINUS_H_MZ = Formula("[C2H6NO3S]-").monoisotopic_mass

LAB_YAML = """\
instrument: {name: Kestrel-2 Q-TOF, timezone: UTC}
calibrants:
  - {name: siloxane-445, mz: 445.120025, search_ppm: 20}
  - {name: leu-enk, peptide: YGGFL, charge: 1}
expected_ions:
  - {name: caffeine, formula: C8H10N4O2, adduct: "+H", rt_window_min: [0.5, 1.5]}
checks:
  - name: calibrant lost
    metric: calibrant.*.found_fraction
    warning: {below: 0.8}
  - name: expected ions
    metric: expected_ion.*.found
    critical: {is: false}
"""

Edit = Callable[[SynthScan], SynthScan | None]


def _spec(**changes: Any) -> RunSpec:
    base: dict[str, Any] = {
        "duration_s": 120.0,
        "ms2_per_cycle": 1,
        "background_peaks": 40,
        "calibrants": [
            CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=1.5),
            CalibrantTruth(name="leu-enk", mz=LEU_ENK_MZ, offset_ppm=-0.5),
        ],
        "targets": [TargetTruth(name="caffeine", mz=CAFFEINE_MZ, apex_rt_s=60.0)],
    }
    base.update(changes)
    return RunSpec(**base)


def _write_edited(
    path: Path, spec: RunSpec, edit: Edit, monkeypatch: pytest.MonkeyPatch
) -> RunTruth:
    """Write ``spec`` as plain mzML with every generated scan passed through ``edit`` first.

    The truth is the generator's, collected before the edit (the edit is the file's fault).
    """
    original = synth_mzml.iter_scans

    def edited(s: RunSpec, truth: RunTruth) -> Iterator[SynthScan]:
        for scan in original(s, truth):
            out = edit(scan)
            if out is not None:
                yield out

    with monkeypatch.context() as m:
        m.setattr(synth_mzml, "iter_scans", edited)
        return write_mzml(path, spec, indexed=False)


def _cli(*args: str | Path, timeout: float = 60) -> Result:
    return run_cli(*args, cwd=ROOT, set_env={"NO_COLOR": "1"}, timeout=timeout)


def _no_traceback(proc: Result) -> None:
    assert "Traceback" not in proc.stderr + proc.stdout, proc.stderr


# --- one call over many odd files -----------------------------------------------------------


def _nan_beside_calibrant(scan: SynthScan) -> SynthScan:
    """MS1: a NaN point 5 ppm from the siloxane ion (inside its window), one NaN and one inf."""
    if scan.ms_level == 1:
        mz = np.append(scan.mz, SILOXANE_MZ * (1 + 5e-6))
        intensity = np.append(scan.intensity, np.nan)
        order = np.argsort(mz, kind="stable")
        scan.mz, scan.intensity = mz[order], intensity[order]
        scan.intensity[0] = np.inf
    return scan


def _negative_noise(scan: SynthScan) -> SynthScan:
    """MS1: ten background points above m/z 700 (no ion there) turned negative."""
    if scan.ms_level == 1:
        flip = np.flatnonzero(scan.mz > 700.0)[:10]
        scan.intensity[flip] = -scan.intensity[flip]
    return scan


def _all_negative(scan: SynthScan) -> SynthScan:
    scan.intensity = -scan.intensity
    return scan


def _unsorted(scan: SynthScan) -> SynthScan:
    scan.mz, scan.intensity = scan.mz[::-1].copy(), scan.intensity[::-1].copy()
    return scan


def _rt_decreasing(scan: SynthScan) -> SynthScan:
    scan.rt_s = 600.0 - scan.rt_s
    return scan


def _all_zero(scan: SynthScan) -> SynthScan:
    scan.intensity = np.zeros_like(scan.intensity)
    return scan


@pytest.fixture(scope="module")
def batch(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """One ``check --json`` call over odd runs and odd paths; the runs by file name."""
    folder = tmp_path_factory.mktemp("odd runs")
    monkeypatch = pytest.MonkeyPatch()
    truths: dict[str, RunTruth] = {}
    try:
        truths["non-finite.mzML"] = _write_edited(
            folder / "non-finite.mzML", _spec(), _nan_beside_calibrant, monkeypatch
        )
        truths["negative.mzML"] = _write_edited(
            folder / "negative.mzML", _spec(), _negative_noise, monkeypatch
        )
        truths["all negative.mzML"] = _write_edited(
            folder / "all negative.mzML", _spec(), _all_negative, monkeypatch
        )
        truths["unsorted.mzML"] = _write_edited(
            folder / "unsorted.mzML", _spec(), _unsorted, monkeypatch
        )
        truths["rt-down.mzML"] = _write_edited(
            folder / "rt-down.mzML", _spec(), _rt_decreasing, monkeypatch
        )
        truths["zeros.mzML"] = _write_edited(folder / "zeros.mzML", _spec(), _all_zero, monkeypatch)
        truths["ms2 only.mzML"] = _write_edited(
            folder / "ms2 only.mzML", _spec(), lambda s: None if s.ms_level == 1 else s, monkeypatch
        )
    finally:
        monkeypatch.undo()
    truths["QC_ünïcode run.mzML"] = write_mzml(folder / "QC_ünïcode run.mzML", _spec())
    truths["one-scan.mzML"] = write_mzml(folder / "one-scan.mzML", _spec(duration_s=2.0))
    truths["QC_msms.mgf"] = write_mgf(folder / "QC_msms.mgf", _spec())
    truths["negative-mode.mzML"] = write_mzml(
        folder / "negative-mode.mzML",
        _spec(
            polarity=-1,
            calibrants=[CalibrantTruth(name="taurine", mz=TAURINE_MINUS_H_MZ, offset_ppm=2.0)],
            targets=[],
        ),
    )
    (folder / "no peaks.mgf").write_text("BEGIN IONS\nTITLE=blank\nPEPMASS=500.0\nEND IONS\n")
    (folder / "empty.mzML.gz").write_bytes(b"")
    (folder / "mgf-inside.mzML.gz").write_bytes(
        gzip.compress((folder / "no peaks.mgf").read_bytes())
    )
    (folder / "a folder.mzML").mkdir()
    os.symlink(folder / "loop.mzML", folder / "loop.mzML")
    os.mkfifo(folder / "fifo.mzML")
    config = folder / "lab.yaml"
    config.write_text(
        LAB_YAML.replace(
            "  - {name: leu-enk, peptide: YGGFL, charge: 1}\n",
            "  - {name: leu-enk, peptide: YGGFL, charge: 1}\n"
            "  - {name: taurine, formula: C2H7NO3S, adduct: '-H', charge: -1}\n",
        )
    )
    names = [
        "fifo.mzML",
        *truths,
        "no peaks.mgf",
        "empty.mzML.gz",
        "mgf-inside.mzML.gz",
        "a folder.mzML",
        "loop.mzML",
        "missing.mzML",
    ]
    proc = _cli("check", "--no-progress", "--json", "-c", config, *(folder / n for n in names))
    text = _cli("check", "--no-progress", "-c", config, *(folder / n for n in names))
    runs = {r["file"]: r for r in json.loads(proc.stdout)["runs"]}
    return {"proc": proc, "text": text, "runs": runs, "truths": truths, "names": names}


def _cal(run: dict[str, Any], name: str) -> dict[str, Any]:
    found: dict[str, Any] = next(c for c in run["calibrants"] if c["name"] == name)
    return found


def test_every_file_gets_a_run_and_exit_1_without_traceback(batch: dict[str, Any]) -> None:
    """All files of the call are reported in order, the bad ones unreadable; exit 4, because
    the batch names files that cannot be opened (a missing one, a symlink loop)."""
    proc = batch["proc"]
    _no_traceback(proc)
    _no_traceback(batch["text"])
    assert proc.returncode == 4  # watcher/cli/exitcodes.py: NO_INPUT
    assert batch["text"].returncode == 4
    assert list(batch["runs"]) == batch["names"]


@pytest.mark.parametrize(
    ("name", "fragment"),
    [
        ("fifo.mzML", "not a regular file"),
        ("a folder.mzML", "directory"),
        ("loop.mzML", "symbolic links"),
        ("missing.mzML", "No such file"),
        ("empty.mzML.gz", "empty"),
        ("mgf-inside.mzML.gz", "MGF"),
    ],
)
def test_bad_paths_are_unreadable_with_one_line_naming_the_file(
    batch: dict[str, Any], name: str, fragment: str
) -> None:
    """A FIFO, folder, symlink loop, missing, 0-byte .gz or MGF-in-.gz: one line, file named."""
    run = batch["runs"][name]
    assert run["status"] == "unreadable"
    assert run["error"].startswith(f"{name}: unreadable: ")
    assert fragment in run["error"]
    assert "\n" not in run["error"]


def test_nan_and_inf_points_do_not_hide_the_calibrant_or_the_tic(batch: dict[str, Any]) -> None:
    """NaN beside a calibrant, NaN/inf elsewhere: calibrant found in every scan, TIC finite."""
    run = batch["runs"]["non-finite.mzML"]
    truth = batch["truths"]["non-finite.mzML"]
    siloxane = _cal(run, "siloxane-445")
    assert siloxane["found_fraction"] == 1.0  # synth truth: present in every MS1 scan
    assert siloxane["median_ppm"] == pytest.approx(1.5, abs=0.05)  # synth truth offset_ppm
    tic = run["signal"]["tic_median"]
    # synth truth: the header TIC is NaN there, the arrays hold the same ions minus the inf point
    assert tic is not None
    assert tic == pytest.approx(truth.tic_median, rel=0.05)
    assert run["signal"]["dropouts"] == 0


def test_negative_intensities_never_give_a_negative_tic(batch: dict[str, Any]) -> None:
    """A few negative points: TIC and calibrants as before; all negative: TIC 0, not below."""
    run = batch["runs"]["negative.mzML"]
    truth = batch["truths"]["negative.mzML"]
    # synth truth: ten background points flipped; the calibrants' 4e5 dominate the TIC
    assert 0 < run["signal"]["tic_median"] <= truth.tic_median
    assert run["signal"]["dropouts"] == 0
    assert _cal(run, "siloxane-445")["found_fraction"] == 1.0
    flipped = batch["runs"]["all negative.mzML"]["signal"]
    assert flipped["tic_median"] == 0.0  # common practice: a TIC is a sum of counts, never < 0
    assert flipped["bpi_median"] == 0.0


def test_unsorted_arrays_and_decreasing_rt_still_measure_right(batch: dict[str, Any]) -> None:
    """Reversed m/z arrays and RT running backwards give the generator's calibrant errors."""
    for name in ("unsorted.mzML", "rt-down.mzML"):
        run = batch["runs"][name]
        assert _cal(run, "siloxane-445")["median_ppm"] == pytest.approx(1.5, abs=0.05), name
        assert _cal(run, "leu-enk")["median_ppm"] == pytest.approx(-0.5, abs=0.05), name
    down = batch["runs"]["rt-down.mzML"]["signal"]
    assert down["cycle_time_s_median"] == pytest.approx(2.0)  # synth: MS1 every 2 s
    assert down["rt_end_s"] == pytest.approx(600.0)


def test_all_zero_intensities_find_no_calibrant(batch: dict[str, Any]) -> None:
    """A run of zeros: calibrants not found (0 %), warning, TIC 0; nothing invented."""
    run = batch["runs"]["zeros.mzML"]
    assert _cal(run, "siloxane-445")["found_fraction"] == 0.0
    assert run["signal"]["tic_median"] == 0.0
    assert run["status"] == "critical"  # caffeine not found either


def test_runs_without_ms1_have_no_calibrant_or_ion_findings(batch: dict[str, Any]) -> None:
    """MGF, an MS2-only mzML and a peakless MGF: null metrics with a note, no lost/not-found."""
    for name in ("QC_msms.mgf", "ms2 only.mzML", "no peaks.mgf"):
        run = batch["runs"][name]
        assert run["findings"] == [], name  # README: MGF metrics are null, with a note
        assert run["status"] == "ok", name
        assert any("no MS1" in note for note in run["notes"]), name
        assert run["signal"]["ms2_count"] >= 1, name


def test_negative_mode_measures_minus_h_and_skips_positive_calibrants(
    batch: dict[str, Any],
) -> None:
    """[M-H]- taurine measured at the generator's +2 ppm; + calibrants not searched, not lost."""
    run = batch["runs"]["negative-mode.mzML"]
    taurine = _cal(run, "taurine")
    assert taurine["median_ppm"] == pytest.approx(2.0, abs=0.05)  # synth truth offset_ppm
    assert taurine["found_fraction"] == 1.0
    assert _cal(run, "siloxane-445")["found_fraction"] is None  # never searched: not measured
    assert not [f for f in run["findings"] if f["check"] == "calibrant lost"]


def test_unicode_and_spaces_in_names_and_a_single_scan(batch: dict[str, Any]) -> None:
    """A QC run with unicode and spaces is measured and judged; one MS1 scan gives no slope."""
    run = batch["runs"]["QC_ünïcode run.mzML"]
    assert run["status"] == "ok"
    assert _cal(run, "siloxane-445")["median_ppm"] == pytest.approx(1.5, abs=0.05)
    assert "QC_ünïcode run.mzML" in batch["text"].stdout
    one = batch["runs"]["one-scan.mzML"]
    assert one["signal"]["ms1_count"] == 1
    assert _cal(one, "siloxane-445")["slope_ppm_per_h"] is None
    assert one["signal"]["cycle_time_s_median"] is None


def test_text_output_shows_no_nan(batch: dict[str, Any]) -> None:
    """The table prints '-' for a value not measured, never 'nan'."""
    assert "nan" not in batch["text"].stdout.lower()


# --- search windows ---------------------------------------------------------------------------


def test_huge_and_tiny_search_ppm(tmp_path: Path) -> None:
    """search_ppm 1e5 still finds the dominant calibrant; 1e-3 ppm finds nothing, no crash."""
    run_path = tmp_path / "run.mzML"
    write_mzml(run_path, _spec())
    config = tmp_path / "lab.yaml"
    config.write_text(
        "calibrants:\n"
        "  - {name: wide, mz: 445.120025, search_ppm: 100000}\n"
        "  - {name: narrow, mz: 556.276575, search_ppm: 0.001}\n"
    )
    proc = _cli("check", "--no-progress", "--json", "-c", config, run_path)
    _no_traceback(proc)
    run = json.loads(proc.stdout)["runs"][0]
    # synth: the calibrant (2e5) outweighs the lognormal background around 2e4
    assert _cal(run, "wide")["median_ppm"] == pytest.approx(1.5, abs=0.05)
    assert _cal(run, "narrow")["found_fraction"] == 0.0  # truth is -0.5 ppm, outside 0.001


def test_expected_ion_window_outside_the_run_is_not_found(tmp_path: Path) -> None:
    """An RT window after the run ends: not found, the check fires critical, exit 1."""
    run_path = tmp_path / "QC_short.mzML"
    write_mzml(run_path, _spec())
    config = tmp_path / "lab.yaml"
    config.write_text(LAB_YAML.replace("[0.5, 1.5]", "[50, 60]"))
    proc = _cli("check", "--no-progress", "--json", "-c", config, run_path)
    _no_traceback(proc)
    assert proc.returncode == 1
    run = json.loads(proc.stdout)["runs"][0]
    assert run["expected_ions"][0]["found"] is False
    assert run["status"] == "critical"
    assert any("no MS1 scan in its RT window 50-60 min" in note for note in run["notes"])


def test_no_rt_at_all(tmp_path: Path) -> None:
    """Spectra without scan start time: calibrants measured, RT metrics null, no traceback."""
    source = tmp_path / "src.mzML"
    write_mzml(source, _spec(), indexed=False)
    import re

    text = re.sub(r"\s*<cvParam[^>]*MS:1000016[^>]*/>", "", source.read_text())
    run_path = tmp_path / "nort.mzML"
    run_path.write_text(text)
    proc = _cli("check", "--no-progress", "--json", "-c", _lab(tmp_path), run_path)
    _no_traceback(proc)
    run = json.loads(proc.stdout)["runs"][0]
    assert run["signal"]["rt_start_s"] is None
    assert run["signal"]["ms1_count"] == 60  # synth: 120 s / 2 s
    assert _cal(run, "siloxane-445")["median_ppm"] == pytest.approx(1.5, abs=0.05)


def _lab(tmp_path: Path, text: str = LAB_YAML) -> Path:
    path = tmp_path / "lab.yaml"
    path.write_text(text)
    return path


# --- configs ----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("raw", "fragment"),
    [
        (b"- a\n- b\n", "mapping"),
        (b"instrument:\n\tname: x\n", ":2:"),
        (b"checks:\n  - name: c\n    metric: signal.tic_median\n    warning: {above: '3'}\n",
         "above"),
        (b"checks:\n  - name: c\n    metric: expected_ion.*.found\n    critical: {is: 'false'}\n",
         "is"),
        (b"checks:\n  - name: c\n    metric: signal.tic_median\n    warning: {above: 3}\n"
         b"    for_runs: 0\n", "for_runs"),
        (b"calibrants:\r\n  - name: a\r\n    mz: 445.12\r\n    serch_ppm: 3\r\n", ":4:"),
        (b"calibrants:\n  - {name: a, mz: 445.12}\nchecks:\n  - name: c\n"
         b"    metric: calibrant.nosuch.median_ppm\n    warning: {above: 3}\n", "nosuch"),
    ],
)  # fmt: skip
def test_bad_configs_exit_2_with_file_and_line_in_validate_check_and_run(
    tmp_path: Path, raw: bytes, fragment: str
) -> None:
    """List at top, tab, string threshold, is 'false', for_runs 0, CRLF typo, unknown calibrant."""
    config = tmp_path / "lab.yaml"
    config.write_bytes(raw)
    run_path = tmp_path / "run.mgf"
    run_path.write_text("BEGIN IONS\nPEPMASS=500\n100 1\nEND IONS\n")
    for args in (("validate", "-c", config), ("check", "-c", config, run_path)):
        proc = _cli(*args)
        _no_traceback(proc)
        assert proc.returncode == 2, (args, proc.stderr)  # cli.py: 2 = configuration error
        first = proc.stderr.strip().splitlines()[0]
        assert first.startswith("lab.yaml") or "lab.yaml" in first, proc.stderr
        assert fragment in proc.stderr
    proc = _cli("run", "-c", config, timeout=30)
    _no_traceback(proc)
    assert proc.returncode == 2
    assert fragment in proc.stderr


def test_bom_config_is_read(tmp_path: Path) -> None:
    """A UTF-8 byte order mark (Windows editors) does not break the config."""
    config = tmp_path / "lab.yaml"
    config.write_bytes(b"\xef\xbb\xbf" + LAB_YAML.encode())
    proc = _cli("validate", "-c", config, "--file-only")
    assert proc.returncode == 0, proc.stderr
    assert "2 calibrants" in proc.stdout


def test_westgard_on_a_boolean_metric_is_a_config_problem(tmp_path: Path) -> None:
    """westgard on expected_ion.*.found (true/false) is refused with the key named."""
    config = _lab(
        tmp_path,
        LAB_YAML + "  - name: wg\n    metric: expected_ion.caffeine.found\n    westgard: [1-3s]\n"
        "    baseline: {mean: 0, sd: 1}\n",
    )
    proc = _cli("validate", "-c", config)
    assert proc.returncode == 2
    assert "westgard" in proc.stderr


def test_run_refuses_a_config_without_watch_folders(tmp_path: Path) -> None:
    """An empty config file makes ``run`` exit 2 naming watch.folders, not watch nothing."""
    config = tmp_path / "lab.yaml"
    config.write_text("")
    try:
        proc = _cli("run", "-c", config, timeout=15)
    except subprocess.TimeoutExpired:
        pytest.fail("the daemon started with nothing to watch")
    assert proc.returncode == 2
    assert "watch.folders" in proc.stderr
