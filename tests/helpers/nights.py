"""Synthetic QC runs of one evening queue, each with a known calibrant offset (ground truth in
``synth.CalibrantTruth``), for the end-to-end alert tests."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING

import synth

if TYPE_CHECKING:
    from pathlib import Path

SILOXANE_MZ = 445.120025  # polysiloxane background ion [C2H6SiO]6+H+ (common practice, lock mass)
DAY = datetime(2026, 11, 27, 18, 0, tzinfo=UTC)


def run_bytes(offset_ppm: float, n: int, tmp: Path) -> bytes:
    """A 10 s synthetic run whose siloxane calibrant sits ``offset_ppm`` off; n-th of the night."""
    spec = synth.RunSpec(
        duration_s=10,
        ms2_per_cycle=0,
        background_peaks=20,
        seed=n,
        calibrants=[
            synth.CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=offset_ppm)
        ],
        start_time=DAY + timedelta(minutes=25 * n),
    )
    path = tmp / f"gen{n}.mzML"
    synth.write_mzml(path, spec, indexed=False)
    return path.read_bytes()
