"""Write the MS2 spectra of a synthetic run as MGF (no MS1 there: no calibrants, no XICs)."""

from __future__ import annotations

from pathlib import Path

from synth._out import CountingWriter, fmt
from synth.model import RunSpec, RunTruth, iter_scans


def write_mgf(path: Path | str, spec: RunSpec) -> RunTruth:
    """Generate ``spec`` and write its MS2 spectra as MGF; the truth still covers MS1 scans."""
    path = Path(path)
    truth = RunTruth()
    with CountingWriter(path) as out:
        out.write(f"# synthetic run {path.stem}, MS2 spectra only\n")
        for scan in iter_scans(spec, truth):
            if scan.ms_level == 1:
                continue
            charge = scan.precursor_charge or 0
            sign = "+" if spec.polarity > 0 else "-"
            peaks = "\n".join(
                f"{mz:.6f} {inten:.2f}" for mz, inten in zip(scan.mz, scan.intensity, strict=True)
            )
            out.write(
                "BEGIN IONS\n"
                f"TITLE={path.stem}.{scan.scan_number}.{scan.scan_number}.{charge}\n"
                f"PEPMASS={fmt(scan.precursor_mz or 0.0)} {fmt(scan.precursor_intensity or 0.0)}\n"
                + (f"CHARGE={charge}{sign}\n" if charge else "")
                + f"RTINSECONDS={fmt(scan.rt_s)}\n"
                f"SCANS={scan.scan_number}\n"
                f"{peaks}\n"
                "END IONS\n\n"
            )
    return truth
