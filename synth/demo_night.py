"""The demo scenario: one evening queue on an invented instrument, written to ``demo_drop/``.

Larkfield Metabolomics Core (invented) runs an evening queue on its "Kestrel-2 Q-TOF" (invented):
QC-standard injections between plasma sample runs. Over the evening the mass calibration drifts
slowly, then jumps out of tolerance; the queued re-calibration brings it back; one sample's spray
fails part way; one QC injection lacks reserpine; one export is cut off while copying. The
generator is seeded, so ``python -m synth.demo_night demo_drop`` always writes the same bytes
(apart from gzip's header time, which it pins), and ``demo_drop/TRUTH.json`` records what each
file really holds and what a correct monitor should say about it.

Usage::

    python -m synth.demo_night demo_drop
"""

from __future__ import annotations

import argparse
import json
import math
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

from synth import CalibrantTruth, RunSpec, TargetTruth, write_mzml, write_mzxml

if TYPE_CHECKING:
    from synth.model import RunTruth

TZ = ZoneInfo("Europe/Oslo")
QUEUE_START = datetime(2026, 11, 27, 18, 0, tzinfo=TZ)  # a Friday evening
SPACING = timedelta(minutes=25)
DURATION_S = 600.0  # 10-minute gradient: caffeine ~3 min, MRFA ~6 min, reserpine ~9 min

# Theoretical m/z, computed from the compositions (and checked in tests against molmass and
# tests/data/check-ions.tsv): siloxane [(C2H6SiO)6+H]+, leucine enkephalin [M+H]+,
# caffeine [M+H]+, MRFA [M+2H]2+, reserpine [M+H]+.
SILOXANE_MZ = 445.120025
LEU_ENK_MZ = 556.276575
CAFFEINE = ("caffeine", 195.087652, 1, 0.1032, 0.0089, 180.0)
MRFA = ("mrfa", 262.636121, 2, 0.2886, 0.0952, 360.0)
RESERPINE = ("reserpine", 609.280657, 1, 0.3724, 0.0859, 540.0)


@dataclass(kw_only=True)
class DemoRun:
    """One file of the queue and what it is meant to show."""

    file: str
    drift_ppm: float  # calibration error of the whole run (both calibrants)
    story: str  # what happened, in the words of the lab
    expect_status: str  # what a correct monitor says: ok / notice / warning / critical / unreadable
    fmt: str = "mzML"  # mzML, mzML.gz, mzXML
    dropouts: list[tuple[float, float, float]] = field(default_factory=list)
    missing: tuple[str, ...] = ()
    truncate_at: float | None = None  # keep this fraction of the bytes (an interrupted copy)
    tic_scale: float = 1.0


QUEUE: tuple[DemoRun, ...] = (
    DemoRun(
        file="QC_001_mix.mzML", drift_ppm=0.4, story="first QC of the evening", expect_status="ok"
    ),
    DemoRun(file="S01_plasma-A01.mzML", drift_ppm=0.8, story="sample", expect_status="ok"),
    DemoRun(
        file="S02_plasma-A02.mzML",
        drift_ppm=1.3,
        story="sample, calibration creeping up",
        expect_status="ok",
    ),
    DemoRun(
        file="QC_002_mix.mzML",
        drift_ppm=1.9,
        story="QC, drift still inside tolerance",
        expect_status="ok",
    ),
    DemoRun(
        file="S03_plasma-A03.mzML",
        drift_ppm=2.5,
        story="sample, drift near the limit",
        expect_status="notice",
    ),
    DemoRun(
        file="S04_plasma-A04.mzML",
        drift_ppm=3.4,
        story="sample, drift past +3 ppm",
        expect_status="warning",
    ),
    DemoRun(
        file="QC_003_mix.mzML",
        drift_ppm=6.2,
        story="QC, calibration jumped out (+6 ppm)",
        expect_status="critical",
    ),
    DemoRun(
        file="S05_plasma-A05.mzML",
        drift_ppm=0.3,
        story="queued re-calibration ran; spray failed for 90 s mid-run",
        expect_status="critical",
        dropouts=[(300.0, 390.0, 0.01)],
    ),
    DemoRun(
        file="S06_plasma-A06.mzML",
        drift_ppm=-0.2,
        story="sample, spray stable again",
        expect_status="ok",
    ),
    DemoRun(
        file="QC_004_mix.mzML",
        drift_ppm=0.1,
        story="QC injection without reserpine",
        expect_status="critical",
        missing=("reserpine",),
    ),
    DemoRun(
        file="S07_plasma-A07.mzML.gz",
        drift_ppm=-0.4,
        story="sample, exported compressed",
        expect_status="ok",
        fmt="mzML.gz",
    ),
    DemoRun(
        file="S08_plasma-A08.mzXML",
        drift_ppm=0.2,
        story="sample, exported as mzXML",
        expect_status="ok",
        fmt="mzXML",
    ),
    DemoRun(
        file="QC_005_mix.mzML",
        drift_ppm=-0.1,
        story="export cut off while copying",
        expect_status="unreadable",
        truncate_at=0.6,
    ),
    DemoRun(
        file="QC_006_mix.mzML",
        drift_ppm=0.2,
        story="QC, everything back in spec",
        expect_status="ok",
    ),
)


def spec_for(run: DemoRun, index: int) -> RunSpec:
    """The synthetic run behind one queue entry (seeded by its position in the queue)."""
    is_qc = run.file.startswith("QC_")
    targets = []
    if is_qc:
        for name, mz, charge, m1, m2, apex_rt_s in (CAFFEINE, MRFA, RESERPINE):
            if name in run.missing:
                continue
            targets.append(
                TargetTruth(
                    name=name,
                    mz=mz,
                    charge=charge,
                    m1_ratio=m1,
                    m2_ratio=m2,
                    apex_rt_s=apex_rt_s,
                    sigma_s=7.0,
                    height=8e5,
                    offset_ppm=run.drift_ppm,
                )
            )
    calibrants = [
        CalibrantTruth(
            name="siloxane-445",
            mz=SILOXANE_MZ,
            offset_ppm=run.drift_ppm,
            jitter_ppm=0.3,
            intensity=3e5,
        ),
        CalibrantTruth(
            name="leu-enk", mz=LEU_ENK_MZ, offset_ppm=run.drift_ppm, jitter_ppm=0.4, intensity=1.5e5
        ),
    ]
    return RunSpec(
        duration_s=DURATION_S,
        ms1_interval_s=3.0,
        ms2_per_cycle=1,
        ms2_peaks=40,
        background_peaks=80,
        calibrants=calibrants,
        targets=targets,
        dropouts=list(run.dropouts),
        tic_scale=run.tic_scale,
        seed=1000 + index,
        start_time=(QUEUE_START + index * SPACING).astimezone(ZoneInfo("UTC")),
    )


def write_run(run: DemoRun, index: int, out_dir: Path) -> RunTruth:
    """Write one queue entry's file (truncated where the story says so)."""
    path = out_dir / run.file
    spec = spec_for(run, index)
    if run.fmt == "mzXML":
        truth = write_mzxml(path, spec)
    else:
        truth = write_mzml(path, spec, indexed=True, gz=run.fmt == "mzML.gz")
    if run.truncate_at is not None:
        data = path.read_bytes()
        path.write_bytes(data[: int(len(data) * run.truncate_at)])
    return truth


def _truth_record(run: DemoRun, index: int, truth: RunTruth) -> dict[str, Any]:
    def clean(x: float) -> float | None:
        return None if x is None or (isinstance(x, float) and math.isnan(x)) else round(x, 4)

    return {
        "file": run.file,
        "format": run.fmt,
        "acquired_at": (QUEUE_START + index * SPACING).isoformat(),
        "story": run.story,
        "expect_status": run.expect_status,
        "truncated": run.truncate_at is not None,
        "duration_s": DURATION_S,
        "ms1_count": truth.ms1_count,
        "ms2_count": truth.ms2_count,
        "tic_median": clean(truth.tic_median),
        "calibrants": {
            name: {"mz": c.mz, "median_ppm": clean(c.median_ppm)}
            for name, c in truth.calibrants.items()
        },
        "expected_ions_present": sorted(truth.targets),
        "expected_ions_missing": list(run.missing),
        "dropouts_s": [[a, b] for a, b, _ in run.dropouts],
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out_dir", type=Path)
    args = parser.parse_args(argv)
    out_dir: Path = args.out_dir
    out_dir.mkdir(parents=True, exist_ok=True)
    records = []
    for index, run in enumerate(QUEUE):
        truth = write_run(run, index, out_dir)
        records.append(_truth_record(run, index, truth))
        size_kb = (out_dir / run.file).stat().st_size / 1024
        print(f"{run.file:28s} {size_kb:8.0f} KB  {run.story}")
    (out_dir / "TRUTH.json").write_text(json.dumps({"queue": records}, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
