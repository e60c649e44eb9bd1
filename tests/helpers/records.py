"""Records for tests that need a stage's input without running the stages before it.

``make_metrics``: a run's metrics (two calibrants, one expected ion, a TIC median);
``make_finding`` and ``make_verdict``: what the judge hands to the notifier. Calibrant and ion
m/z values from tests/data/check-ions.tsv (molmass and pyteomics agree there).
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

from watcher.records import (
    CalibrantDrift,
    ExpectedIonResult,
    Finding,
    RunFile,
    RunMetrics,
    Severity,
    SignalMetrics,
    Status,
    Verdict,
)

SILOXANE_MZ = 445.120025  # (C2H6SiO)6 + H+, check-ions.tsv
LEU_ENK_MZ = 556.276575  # YGGFL [M+H]+, check-ions.tsv
CAFFEINE_MZ = 195.087652  # C8H10N4O2 [M+H]+, check-ions.tsv


def make_metrics(
    *,
    file: str = "QC_0001.mzML",
    tic: float | None = 1.0e6,
    siloxane_ppm: float | None = 0.5,
    leu_enk_ppm: float | None = -0.3,
    caffeine_found: bool = True,
    acquired_at: datetime | None = None,
) -> RunMetrics:
    """Run metrics for tests: two calibrants, one expected ion, a TIC median."""

    def drift(name: str, mz: float, ppm: float | None) -> CalibrantDrift:
        return CalibrantDrift(
            name=name,
            mz=mz,
            median_ppm=ppm,
            mad_ppm=0.2,
            p05_ppm=None,
            p95_ppm=None,
            found_fraction=1.0 if ppm is not None else 0.0,
            median_intensity=5.0e4,
            slope_ppm_per_h=None,
        )

    return RunMetrics(
        file=file,
        format="mzML",
        acquired_at=acquired_at,
        signal=SignalMetrics(
            ms1_count=600,
            ms2_count=2400,
            rt_start_s=0.0,
            rt_end_s=720.0,
            tic_median=tic,
            bpi_median=None,
            dropouts=0,
            longest_dropout_s=0.0,
        ),
        calibrants=(
            drift("siloxane-445", SILOXANE_MZ, siloxane_ppm),
            drift("leu-enk", LEU_ENK_MZ, leu_enk_ppm),
        ),
        expected_ions=(
            ExpectedIonResult(
                name="caffeine",
                mz=CAFFEINE_MZ,
                found=caffeine_found,
                apex_rt_s=180.0,
                apex_intensity=2.0e5,
                ppm=0.4,
                fwhm_s=4.0,
                m1_ratio=None,
                m1_ratio_expected=None,
            ),
        ),
    )


def make_finding(
    severity: Severity = Severity.WARNING,
    *,
    check: str = "calibration drift",
    metric: str = "calibrant.siloxane-445.median_ppm",
    value: float = 3.6,
    limit: str = "outside [-3, 3]",
    rule: str = "limit",
    forecast_h: float | None = None,
) -> Finding:
    return Finding(
        check=check,
        severity=severity,
        metric=metric,
        subject=metric,
        message=f"{metric} is {value}",
        value=value,
        limit=limit,
        rule=rule,
        forecast_h=forecast_h,
    )


def make_verdict(
    name: str,
    findings: tuple[Finding, ...] = (),
    *,
    at_s: float,
    status: Status | None = None,
    error: str | None = None,
    folder: Path = Path("/exports"),
    evaluated: frozenset[tuple[str, str]] | None = None,
    metrics: RunMetrics | None = None,
) -> Verdict:
    """A verdict as the rules would hand it on; ``evaluated`` defaults to the findings' keys;
    ``metrics`` are what the run measured (None: only the findings are known)."""
    if status is None:
        worst = max(findings, key=lambda f: f.severity.rank, default=None)
        status = Status.OK if worst is None else Status(str(worst.severity))
    return Verdict(
        run_file=RunFile(path=folder / name, size=1000, mtime_ns=int(at_s * 1e9)),
        status=status,
        acquired_at=datetime.fromtimestamp(at_s, UTC),
        error=error,
        metrics=metrics,
        findings=findings,
        evaluated=(
            frozenset((f.check, f.subject) for f in findings) if evaluated is None else evaluated
        ),
        judged_at=datetime.fromtimestamp(at_s, UTC),
    )
