"""`ionwarden check`: JSON and table output, exit codes, bad files and configs, mzQC, recording."""

from __future__ import annotations

import io
import json
import sqlite3
from pathlib import Path
from typing import Any

import jsonschema
import pytest

from synth import CalibrantTruth, RunSpec, TargetTruth, write_mzml
from tests.helpers.cli import Result, run_cli
from tests.helpers.refdata import REFERENCE as SHARED_REFERENCE
from watcher.cli.progress import ProgressBar

ROOT = Path(__file__).resolve().parents[2]
REFERENCE = SHARED_REFERENCE
SILOXANE_MZ = 445.120025  # reference/check-ions.tsv
CAFFEINE_MZ = 195.087652  # reference/check-ions.tsv, caffeine [M+H]+

LAB_YAML = """\
instrument: {name: Kestrel-2 Q-TOF, timezone: UTC}
calibrants:
  - {name: siloxane-445, mz: 445.120025, search_ppm: 30}
expected_ions:
  - {name: caffeine, formula: C8H10N4O2, adduct: "+H", charge: 1, rt_window_min: [0.5, 1.5],
     min_intensity: 1.0e4}
checks:
  - name: calibration drift
    metric: calibrant.siloxane-445.median_ppm
    warning: {outside: [-3, 3]}
    critical: {outside: [-5, 5]}
"""

RUN_KEYS = {
    "file", "path", "format", "status", "error", "error_kind", "acquired_at", "signal",
    "calibrants", "expected_ions", "mass_correction", "findings", "notes",
}  # fmt: skip


def _run(tmp_path: Path, name: str, offset_ppm: float) -> Path:
    path = tmp_path / name
    write_mzml(
        path,
        RunSpec(
            duration_s=120.0,
            ms2_per_cycle=1,
            background_peaks=40,
            calibrants=[CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=offset_ppm)],
            targets=[TargetTruth(name="caffeine", mz=CAFFEINE_MZ, apex_rt_s=60.0, m1_ratio=0.1032)],
        ),
    )
    return path


def _config(tmp_path: Path, extra: str = "") -> Path:
    path = tmp_path / "lab.yaml"
    path.write_text(LAB_YAML + extra)
    return path


def _check(*args: str | Path, cwd: Path = ROOT) -> Result:
    return run_cli("check", *args, cwd=cwd, set_env={"NO_COLOR": ""}, timeout=120)


def _json(proc: Result) -> dict[str, Any]:
    data: dict[str, Any] = json.loads(proc.stdout)
    return data


def test_json_lists_every_run_with_the_documented_keys(tmp_path: Path) -> None:
    """--json prints exactly {"runs": [...]}, one entry per file with the keys of the issue."""
    a, b = _run(tmp_path, "QC_a.mzML", 0.5), _run(tmp_path, "QC_b.mzML", -0.5)
    proc = _check("--json", "--no-progress", "-c", _config(tmp_path), a, b)
    assert proc.returncode == 0, proc.stderr
    data = _json(proc)
    assert list(data) == ["runs"]
    assert [r["file"] for r in data["runs"]] == ["QC_a.mzML", "QC_b.mzML"]
    for run in data["runs"]:
        assert set(run) == RUN_KEYS
        assert run["status"] == "ok"
        assert run["format"] == "mzML"
        assert run["error"] is None
        assert run["findings"] == []
        assert run["signal"]["ms1_count"] == 60
        assert [c["name"] for c in run["calibrants"]] == ["siloxane-445"]
        assert {"mz", "median_ppm", "mad_ppm", "slope_ppm_per_h"} <= set(run["calibrants"][0])
        assert [i["name"] for i in run["expected_ions"]] == ["caffeine"]
        assert run["expected_ions"][0]["found"] is True
        assert run["mass_correction"] is None  # one calibrant: no fit


def test_a_fired_check_gives_findings_status_and_exit_1(tmp_path: Path) -> None:
    """A +4 ppm calibrant crosses the warning limit: status warning, a finding, exit code 1."""
    path = _run(tmp_path, "QC_drift.mzML", 4.0)
    proc = _check("--json", "-c", _config(tmp_path), path)
    assert proc.returncode == 1
    run = _json(proc)["runs"][0]
    assert run["status"] == "warning"
    assert [f["check"] for f in run["findings"]] == ["calibration drift"]
    assert run["findings"][0]["severity"] == "warning"
    assert run["findings"][0]["value"] == pytest.approx(4.0, abs=0.05)


def test_bad_file_is_unreadable_and_the_others_are_measured(tmp_path: Path) -> None:
    """A truncated file gets one error line naming it; the good file of the call is measured."""
    good = _run(tmp_path, "QC_good.mzML", 0.0)
    bad = tmp_path / "QC_cut.mzML"
    bad.write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    proc = _check("--json", "-c", _config(tmp_path), bad, good)
    assert proc.returncode == 1
    first, second = _json(proc)["runs"]
    assert first["status"] == "unreadable"
    assert first["error"].startswith("QC_cut.mzML: unreadable: ")
    assert "\n" not in first["error"]
    assert first["signal"] is None
    assert first["calibrants"] == []
    assert second["status"] == "ok"
    assert "Traceback" not in proc.stderr


def test_missing_file_is_unreadable_not_a_crash(tmp_path: Path) -> None:
    """A path that does not exist is reported as unreadable with the reason, and the call exits
    4 (a file could not be opened), not 1 (a run failed QC): the two call for different acts."""
    proc = _check("-c", _config(tmp_path), tmp_path / "QC_gone.mzML")
    assert proc.returncode == 4
    assert "QC_gone.mzML: unreadable: cannot open" in proc.stdout
    assert "Traceback" not in proc.stderr


def test_config_error_exits_2_with_file_line_and_key(tmp_path: Path) -> None:
    """An unknown config key is reported as file:line: key and exit code 2, nothing measured."""
    config = tmp_path / "lab.yaml"
    config.write_text("calibrants:\n  - {name: x, mz: 445.12, serch_ppm: 3}\n")
    proc = _check("-c", config, _run(tmp_path, "QC_a.mzML", 0.0))
    assert proc.returncode == 2
    assert f"{config}:2:" in proc.stderr
    assert "serch_ppm" in proc.stderr
    assert proc.stdout == ""
    assert "Traceback" not in proc.stderr


def test_table_shows_the_blocks_without_colour_off_a_tty(tmp_path: Path) -> None:
    """The default output has status, signal, calibrant and expected-ion tables, no ANSI codes."""
    path = _run(tmp_path, "QC_a.mzML", 2.0)
    proc = _check("-c", _config(tmp_path), path)
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout
    assert out.startswith("QC_a.mzML  mzML  OK")
    for heading in ("signal", "calibrants", "expected ions", "median ppm", "M+1/M obs/exp"):
        assert heading in out
    assert "+2.00" in out  # the calibrant's median ppm
    assert "\x1b[" not in out
    assert "\x1b[" not in proc.stderr  # no progress bar off a TTY


def test_default_config_is_used_without_c(tmp_path: Path) -> None:
    """Without -c the embedded default config's calibrants and expected ions are measured."""
    proc = _check("--json", _run(tmp_path, "QC_a.mzML", 0.0), cwd=tmp_path)
    run = _json(proc)["runs"][0]
    assert [c["name"] for c in run["calibrants"]] == ["siloxane-445", "leu-enk"]
    assert [i["name"] for i in run["expected_ions"]] == ["caffeine", "mrfa", "reserpine"]


def test_mzqc_file_is_written_and_valid(tmp_path: Path) -> None:
    """--mzqc writes one schema-valid mzQC file with a runQuality per measured run."""
    good = _run(tmp_path, "QC_a.mzML", 1.0)
    bad = tmp_path / "S1_empty.mzML"
    bad.write_bytes(b"")
    out = tmp_path / "runs.mzQC"
    proc = _check("--mzqc", out, "-c", _config(tmp_path), good, bad)
    assert proc.returncode == 1
    document = json.loads(out.read_text())
    # HUPO-PSI mzQC schema v1.0.0 (reference/mzqc/mzqc_schema.json)
    schema = json.loads((REFERENCE / "mzqc" / "mzqc_schema.json").read_text())
    assert list(jsonschema.Draft7Validator(schema).iter_errors(document)) == []
    labels = [r["metadata"]["label"] for r in document["mzQC"]["runQualities"]]
    assert labels == ["QC_a.mzML"]


def test_record_adds_runs_to_the_history(tmp_path: Path) -> None:
    """--record with a state_dir writes each judged run (unreadable ones too) to the store."""
    state = tmp_path / "state"
    config = _config(tmp_path, f"state_dir: {state}\n")
    good = _run(tmp_path, "QC_a.mzML", 0.0)
    bad = tmp_path / "QC_empty.mzML"
    bad.write_bytes(b"")
    proc = _check("--record", "-c", config, good, bad)
    assert proc.returncode == 1, proc.stderr
    with sqlite3.connect(state / "ionwarden.sqlite3") as conn:
        rows = conn.execute(
            "SELECT file_name, status, sha256 FROM runs ORDER BY file_name"
        ).fetchall()
    assert [(r[0], r[1]) for r in rows] == [("QC_a.mzML", "ok"), ("QC_empty.mzML", "unreadable")]
    assert len(rows[0][2]) == 64  # the content hash completes the identity


def test_progress_bar_draws_on_a_tty_after_its_delay_and_clears() -> None:
    """The bar stays silent for delay_s, then draws the percentage, and close() erases it."""
    now = [0.0]
    stream = io.StringIO()
    bar = ProgressBar("QC_a.mzML", stream=stream, enabled=True, delay_s=0.5, clock=lambda: now[0])
    bar(10, 100)
    assert stream.getvalue() == ""
    now[0] = 1.0
    bar(42, 100)
    assert "QC_a.mzML [" in stream.getvalue()
    assert stream.getvalue().endswith(" 42 %")
    bar.close()
    assert stream.getvalue().endswith("\r\x1b[2K")


def test_progress_bar_is_off_when_the_stream_is_not_a_tty() -> None:
    """Off a TTY (pipes, logs) nothing is drawn, however long the read takes."""
    stream = io.StringIO()
    bar = ProgressBar("x", stream=stream, delay_s=0.0)
    assert bar.enabled is False
    bar(50, 100)
    bar.close()
    assert stream.getvalue() == ""


def test_mzqc_to_stdout_and_the_config_in_use_is_named(tmp_path: Path) -> None:
    """``--mzqc -`` writes the mzQC document (JSON, HUPO-PSI mzQC 1.0 top level ``mzQC``) to stdout
    and nothing else there; without ``-c`` stderr says the embedded demo config judged the run."""
    run = _run(tmp_path, "QC_a.mzML", 0.0)
    proc = _check("--mzqc", "-", "--no-progress", run)
    assert proc.returncode in (0, 1), proc.stderr
    document = json.loads(proc.stdout)
    assert "mzQC" in document
    assert "embedded demo config" in proc.stderr
    both = _check("--mzqc", "-", "--json", run)
    assert both.returncode == 2


def test_escape_sequences_in_a_file_name_never_reach_the_terminal(tmp_path: Path) -> None:
    """A run named with ESC[31m (and a newline) prints its name escaped: no raw ESC, one line."""
    good = _run(tmp_path, "QC_plain.mzML", 0.0)
    hostile = tmp_path / "QC_\x1b[31mred\nWATCHDOG=1.mzML"
    hostile.write_bytes(good.read_bytes())
    cut = tmp_path / "QC_\x1b]0;title\x07cut.mzML"  # unreadable: the name is in the error too
    cut.write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    proc = _check("--no-progress", "-c", _config(tmp_path), hostile, cut)
    assert "\x1b" not in proc.stdout
    assert "\x1b" not in proc.stderr
    assert "\x07" not in proc.stdout
    assert "QC_\\x1b[31mred\\nWATCHDOG=1.mzML  mzML  OK" in proc.stdout.splitlines()
    assert "QC_\\x1b]0;title\\x07cut.mzML" in proc.stdout
