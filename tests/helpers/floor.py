"""Instruments for the floor page and metrics tests: synthetic runs with known calibrant error,
a lab config per instrument, and ``ionwarden serve`` as a real subprocess.

The runs come from the project's generator (``synth``) with exact ground truth: the calibrant
siloxane-445 (m/z 445.120025) carries ``offset_ppm`` in every MS1 scan, and caffeine [M+H]+
(m/z 195.087652) elutes at 120 s when ``caffeine`` is true.
"""

from __future__ import annotations

import functools
import gc
import json
import re
import socket
import statistics
import subprocess
import time
import warnings
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

import synth
from tests.helpers.cli import cli_env, command

if TYPE_CHECKING:
    from pathlib import Path

SILOXANE_MZ = 445.120025  # polysiloxane background ion [C12H36O6Si6 + H]+ (common practice)
CAFFEINE_MZ = 195.087652  # caffeine [M+H]+, C8H11N4O2+ (monoisotopic, molmass)
START = datetime(2026, 11, 30, 18, 0, tzinfo=UTC)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def write_run(
    path: Path,
    *,
    offset_ppm: float,
    caffeine: bool = True,
    start: datetime = START,
    seed: int = 1,
) -> synth.RunTruth:
    """A 4-minute centroid run with the calibrant at ``offset_ppm``; returns its truth."""
    spec = synth.RunSpec(
        duration_s=240,
        ms2_per_cycle=0,
        background_peaks=30,
        seed=seed,
        start_time=start,
        calibrants=[
            synth.CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=offset_ppm)
        ],
        targets=[synth.TargetTruth(name="caffeine", mz=CAFFEINE_MZ, apex_rt_s=120.0, height=5e5)]
        if caffeine
        else [],
    )
    return synth.write_mzml(path, spec, indexed=True)


def instrument_config(
    root: Path, name: str, *, settle_s: float = 0.3, stall_s: float = 1.0, **extra: Any
) -> Path:
    """``root/lab.yaml`` for instrument ``name``: watch ``root/exports``, store ``root/state``,
    drift warning beyond ±3 ppm and critical beyond ±6 ppm, caffeine expected from 1 to 3 min."""
    (root / "exports").mkdir(parents=True, exist_ok=True)
    cfg: dict[str, Any] = {
        "instrument": {"name": name, "timezone": "UTC"},
        "watch": {
            "folders": [str(root / "exports")],
            "settle_s": settle_s,
            "stall_s": stall_s,
            "rescan_interval_s": 600,
        },
        "state_dir": str(root / "state"),
        "calibrants": [{"name": "siloxane-445", "mz": SILOXANE_MZ, "search_ppm": 30}],
        "expected_ions": [
            {
                "name": "caffeine",
                "formula": "C8H10N4O2",
                "adduct": "+H",
                "rt_window_min": [1, 3],
                "min_intensity": 1e4,
            }
        ],
        "checks": [
            {
                "name": "calibration drift",
                "metric": "calibrant.*.median_ppm",
                "warning": {"outside": [-3, 3]},
                "critical": {"outside": [-6, 6]},
            },
            {
                "name": "caffeine present",
                "metric": "expected_ion.caffeine.found",
                "critical": {"is": False},
            },
        ],
    }
    cfg.update(extra)
    path = root / "lab.yaml"
    path.write_text(json.dumps(cfg, indent=1))
    return path


def record(config: Path, *files: Path) -> subprocess.CompletedProcess[str]:
    """``ionwarden check --record FILES -c CONFIG``: the runs judged and added to the store."""
    return subprocess.run(
        command("check", "--record", "--no-progress", "-c", config, *files),
        capture_output=True,
        text=True,
        timeout=120,
        env=cli_env(),
        check=False,
    )


class Serve:
    """``ionwarden serve -c CONFIG ...`` in a subprocess; ``url`` once it printed its address."""

    def __init__(self, *args: str | Path, log: Path) -> None:
        self.log_path = log
        self._log = log.open("wb")
        self.proc = subprocess.Popen(
            command("serve", *args), stdout=self._log, stderr=subprocess.STDOUT, env=cli_env()
        )
        self.url = ""

    def output(self) -> str:
        return self.log_path.read_text(errors="replace")

    def wait_ready(self, timeout_s: float = 30.0) -> str:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            found = re.search(r"ionwarden serve: (http://\S+/)", self.output())
            if found:
                self.url = found.group(1)
                return self.url
            if self.proc.poll() is not None:
                raise AssertionError(f"serve exited {self.proc.returncode}: {self.output()}")
            time.sleep(0.05)
        raise AssertionError(f"serve printed no address within {timeout_s} s: {self.output()}")

    def wait(self, timeout_s: float = 30.0) -> int:
        return self.proc.wait(timeout=timeout_s)

    def close(self) -> None:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=10)
        self._log.close()


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


def pyteomics_tic_median(path: Path) -> float:
    """Median over the MS1 spectra of the summed intensity array, as pyteomics reads the file
    (a reference reader independent of the project's)."""
    from pyteomics import mzml

    with mzml.MzML(str(path), use_index=False, cv=_psims_cv()) as reader:
        tics = [float(s["intensity array"].sum()) for s in reader if s.get("ms level") == 1]
    return statistics.median(tics)
