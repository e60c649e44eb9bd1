"""Vendor runs end to end: a run folder dropped in the watch folder is converted by the lab's
converter, measured, recorded and alerted under its own name, once, also across a restart.

The daemon is a real subprocess (tests/helpers/daemon.py), the converter a real program
(tests/helpers/converter.py, writing a synth/ run whose siloxane calibrant sits a known
+6 ppm off, outside the +-5 ppm critical limit), the alert receiver a real HTTP server on
127.0.0.1 (apprise json://). Nothing waits a fixed time: rows, lines and bodies with deadlines.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pytest

from tests.helpers.wait import wait_for

if TYPE_CHECKING:
    from tests.helpers.daemon import Lab
    from tests.helpers.receiver import Receiver

CONVERTER = Path(__file__).resolve().parents[1] / "helpers" / "converter.py"
SILOXANE_MZ = 445.120025  # polysiloxane background ion [C2H6SiO]6+H+ (common practice, lock mass)
INSTRUMENT = "Kestrel-2 Q-TOF"
# The last stderr line of each failure mode of tests/helpers/converter.py.
FAIL_LINE = "cannot read QC_0003.d: method file missing"
HANG_LINE = "converting (this one never ends)"
NONE_LINE = "no spectra in acquisition"


def _configure(lab: Lab, url: str, *args: str, timeout_s: float = 120.0) -> None:
    lab.write_config(
        calibrants=[{"name": "siloxane-445", "mz": SILOXANE_MZ, "search_ppm": 30}],
        checks=[
            {
                "name": "calibration drift",
                "metric": "calibrant.*.median_ppm",
                "critical": {"outside": [-5, 5]},
            }
        ],
        alerts={"channels": [{"name": "lab-chat", "url": url}]},
        convert={
            "patterns": ["*.d"],
            "command": [sys.executable, str(CONVERTER), "{input}", "-o", "{output_dir}", *args],
            "timeout_s": timeout_s,
        },
    )


def _drop_vendor_run(lab: Lab, name: str) -> Path:
    """Build the run folder under a hidden name, then rename it in (as a copy tool does)."""
    staging = lab.exports / f".{name}.part"
    (staging / "AcqData").mkdir(parents=True)
    (staging / "AcqData" / "MSScan.bin").write_bytes(bytes(range(256)) * 128)
    (staging / "AcqData" / "MSPeak.bin").write_bytes(b"\x07" * 4321)
    (staging / "sample_info.xml").write_text("<SampleInfo sample='QC mix 3'/>\n")
    run = lab.exports / name
    staging.rename(run)
    return run


def _snapshot(root: Path) -> dict[str, tuple[bytes, int]]:
    return {
        str(p.relative_to(root)): (p.read_bytes() if p.is_file() else b"", p.stat().st_mtime_ns)
        for p in sorted(root.rglob("*"))
    }


def test_vendor_folder_is_converted_measured_and_alerted_once(
    lab: Lab, receiver: Receiver, tmp_path: Path
) -> None:
    """QC_0001.d converts (+6 ppm calibrant) and raises one critical alert under its own
    name; after a restart it is neither converted nor alerted again; the folder is unchanged."""
    conversions = tmp_path / "conversions.txt"
    _configure(lab, receiver.url(), "--offset-ppm", "6", "--runs", str(conversions))
    d = lab.start()
    run = _drop_vendor_run(lab, "QC_0001.d")
    before = _snapshot(run)
    lab.wait_runs(1, timeout_s=60.0)
    bodies = receiver.wait_for(1, timeout_s=30.0)
    assert lab.runs() == [("QC_0001.d", "critical", None)]
    assert receiver.titles() == [f"{INSTRUMENT}: CRITICAL QC_0001.d"]
    # synth truth: +6 ppm (tests/helpers/converter.py --offset-ppm 6), outside +-5 ppm.
    assert "calibration drift, siloxane-445: +6.0 ppm" in bodies[0]["message"]
    wait_for(lambda: lab.health_runs(), 10.0, "the run's health-log line")
    health = lab.health_runs()
    assert [r["file"] for r in health] == ["QC_0001.d"]
    assert d.stop() == 0
    # Restarted: the start-up scan sees the same folder; an ordinary run dropped after it is
    # judged after anything the scan would have queued, so its row closes the question.
    d2 = lab.start()
    lab.drop("QC_0002.mzML", 2)
    lab.wait_runs(2, timeout_s=60.0)
    assert d2.stop() == 0
    assert lab.runs_by_name() == {"QC_0001.d": 1, "QC_0002.mzML": 1}
    assert conversions.read_text().splitlines() == ["QC_0001.d"]
    assert receiver.titles() == [f"{INSTRUMENT}: CRITICAL QC_0001.d"]
    assert _snapshot(run) == before  # the original is only read
    converted = list((lab.state / "converted").rglob("*.mzML"))
    assert [p.name for p in converted] == ["QC_0001.mzML"]


@pytest.mark.parametrize(
    ("args", "timeout_s", "reason"),
    [
        (("--mode", "fail"), 120.0, f"exited with code 3: {FAIL_LINE}"),
        (("--mode", "hang"), 2.0, f"ran past its 2 s limit and was stopped: {HANG_LINE}"),
        (
            ("--mode", "nothing"),
            120.0,
            f"wrote no mzML, mzXML or MGF file (exit code 0): {NONE_LINE}",
        ),
    ],
)
def test_converter_failure_makes_the_run_unreadable(
    lab: Lab, receiver: Receiver, args: tuple[str, ...], timeout_s: float, reason: str
) -> None:
    """A converter that fails, hangs or writes nothing: the vendor run is unreadable with the
    converter's exit code and last stderr line, and the unreadable alert names the run."""
    _configure(lab, receiver.url(), *args, timeout_s=timeout_s)
    d = lab.start()
    run = _drop_vendor_run(lab, "QC_0003.d")
    before = _snapshot(run)
    rows = lab.wait_runs(1, timeout_s=60.0)
    bodies: list[dict[str, Any]] = receiver.wait_for(1, timeout_s=30.0)
    assert d.stop() == 0
    (name, status, error) = rows[0]
    assert (name, status) == ("QC_0003.d", "unreadable")
    assert error is not None
    assert error == f"converter {Path(sys.executable).name} {reason}"
    assert "QC_0003.d" in receiver.titles()[0]
    assert reason in bodies[0]["message"]
    assert _snapshot(run) == before
    shutil.rmtree(lab.state / "converted", ignore_errors=True)
