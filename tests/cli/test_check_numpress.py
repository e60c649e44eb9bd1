"""`ionwarden check A B` where A carries a damaged MS-Numpress array: A is one unreadable line
naming the spectrum (or chromatogram), B is still measured, the process never dies.

The damaged arrays are real ones cut mid-value: the MS-Numpress half-byte layout (Teleman et
al., MCP 2014) then asks for nibbles past the end, where the reference C decoder reads out of
its buffer.
"""

from __future__ import annotations

import base64
import json
from pathlib import Path

import numpy as np
import pynumpress

from synth import RunSpec, write_mzml
from tests.helpers.cli import Result, run_cli
from tests.helpers.refdata import REFERENCE

ROOT = Path(__file__).resolve().parents[2]
CONFIG = """\
instrument: {name: Kestrel-2 Q-TOF, timezone: UTC}
calibrants:
  - {name: siloxane-445, mz: 445.120025, search_ppm: 30}
"""


def _check(*args: str | Path) -> Result:
    return run_cli("check", *args, cwd=ROOT, set_env={"NO_COLOR": ""}, timeout=120)


def _spectrum_with_cut_numpress(tmp_path: Path) -> Path:
    """tiny.pwiz.1.1.mzML with its first MS1 m/z array as Numpress linear, cut mid-value.

    The <mzML> element without the indexedmzML wrapper: its offsets and checksum would no longer
    hold, and the file must reach the reader, not fail the completeness check.
    """
    whole = (REFERENCE / "mzml" / "tiny.pwiz.1.1.mzML").read_bytes()
    data = (
        b'<?xml version="1.0" encoding="utf-8"?>\n'
        + whole[whole.index(b"<mzML") : whole.index(b"</mzML>") + len(b"</mzML>")]
    )
    at = data.index(b'accession="MS:1000514"')
    start = data.index(b"<binary>", at) + len(b"<binary>")
    end = data.index(b"</binary>", start)
    values = np.frombuffer(base64.b64decode(data[start:end]), dtype="<f8")
    raw = np.asarray(
        pynumpress.encode_linear(values, pynumpress.optimal_linear_fixed_point(values)),
        dtype=np.uint8,
    ).tobytes()
    cut = raw[:16] + bytes([0x0F])  # after the two first values: a head of 0, one nibble left
    block_start = data.rindex(b"<binaryDataArray ", 0, at)
    block = data[block_start:start].replace(
        b'accession="MS:1000576" name="no compression"',
        b'accession="MS:1002312" name="MS-Numpress linear prediction compression"',
    )
    path = tmp_path / "A_numpress.mzML"
    path.write_bytes(data[:block_start] + block + base64.b64encode(cut) + data[end:])
    return path


def _chromatogram_with_cut_numpress(tmp_path: Path) -> Path:
    """mini_numpress.chrom.mzML (pymzML, MIT) with its pic intensity array cut mid-value."""
    data = (REFERENCE / "mzml" / "mini_numpress.chrom.mzML").read_bytes()
    at = data.index(b'accession="MS:1000515"')
    start = data.index(b"<binary>", at) + len(b"<binary>")
    end = data.index(b"</binary>", start)
    raw = base64.b64decode(data[start:end])
    path = tmp_path / "A_chrom.mzML"
    # 40 bytes end inside a value (its head, at nibble 79, asks for two more nibbles)
    path.write_bytes(data[:start] + base64.b64encode(raw[:40]) + data[end:])
    return path


def test_a_damaged_numpress_spectrum_does_not_stop_the_next_file(tmp_path: Path) -> None:
    """A: unreadable, 'spectrum 0 (...)' and 'MS-Numpress' in one line; B: measured; exit 1."""
    a = _spectrum_with_cut_numpress(tmp_path)
    b = tmp_path / "B_good.mzML"
    write_mzml(b, RunSpec(duration_s=20.0, ms2_per_cycle=0, background_peaks=20, seed=1))
    config = tmp_path / "lab.yaml"
    config.write_text(CONFIG)
    proc = _check("--json", "--no-progress", "-c", config, a, b)
    # watcher/cli/exitcodes.py (README "exit codes"): 1 = a run is warning, critical or unreadable
    assert proc.returncode == 1, proc.stderr
    runs = json.loads(proc.stdout)["runs"]
    assert [r["file"] for r in runs] == ["A_numpress.mzML", "B_good.mzML"]
    assert runs[0]["status"] == "unreadable"
    error = runs[0]["error"]
    assert "A_numpress.mzML" in error
    assert "spectrum 0 (" in error
    assert "MS-Numpress linear" in error
    assert "\n" not in error
    assert runs[1]["status"] == "ok"
    assert runs[1]["signal"]["ms1_count"] == 10  # 20 s at one MS1 scan per 2 s (RunSpec)


def test_a_damaged_numpress_chromatogram_names_the_chromatogram(tmp_path: Path) -> None:
    """The targeted-run path: 'chromatogram 0 (some_test_id)' in the unreadable line."""
    a = _chromatogram_with_cut_numpress(tmp_path)
    b = tmp_path / "B.mzML"
    b.write_bytes((REFERENCE / "mzml" / "mini.chrom.mzML").read_bytes())
    config = tmp_path / "lab.yaml"
    config.write_text(CONFIG)
    proc = _check("--json", "--no-progress", "-c", config, a, b)
    assert proc.returncode == 1, proc.stderr
    runs = json.loads(proc.stdout)["runs"]
    assert runs[0]["status"] == "unreadable"
    assert "chromatogram 0 (some_test_id)" in runs[0]["error"]
    assert "MS-Numpress pic" in runs[0]["error"]
    assert runs[1]["status"] == "ok"
