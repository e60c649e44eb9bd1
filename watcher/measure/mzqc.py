"""Write run metrics as one mzQC 1.0 document, using PSI-MS CV accessions where a term exists.

Metric -> term (PSI-MS CV 4.1.257, extract in tests/data/psi-ms-qc-terms.tsv):

==============================  ===========================================================
``signal.ms1_count``            MS:4000059 number of MS1 spectra
``signal.ms2_count``            MS:4000060 number of MS2 spectra
``signal.rt_start/end_s``       MS:4000070 retention time acquisition range (s)
``rt_end_s - rt_start_s``       MS:4000067 MS run duration (s)
``signal.cycle_time_s_median``  MS:4000192 MS1 median cycle time (s)
``signal.tic_rt25/50/75_s``     MS:4000190 MS1 TIC quantile RT (min), quartiles
``signal.precursor_charges``    MS:4000063 MS2 known precursor charges fractions (table)
``calibrant.*.median_ppm``      MS:4000072 observed mass accuracy (ppm), one per calibrant
==============================  ===========================================================

Left out because no CV term means the same thing: TIC and base-peak medians (the CV has areas and
maxima, not medians), dropouts (MS:4000098 counts 10x falls, a different rule), injection-time
medians (MS:4000131/4000136 are quantile tuples, and a lone median is not one), calibrant MAD,
percentiles, found fraction and slope, the mass-correction fit, and every expected-ion value
(MS:4000213 keys rows by ProForma peptide sequence; most expected ions are not peptides).
"""

from __future__ import annotations

import json
import math
import os
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

from watcher import __version__
from watcher.records import shown

if TYPE_CHECKING:
    from collections.abc import Sequence

    from watcher.records import RunMetrics, Verdict

MZQC_VERSION = "1.0.0"
PSI_MS_VERSION = "4.1.257"

_CONTROLLED_VOCABULARIES = [
    {
        "name": "Proteomics Standards Initiative Mass Spectrometry Ontology",
        "uri": "http://purl.obolibrary.org/obo/ms.obo",
        "version": PSI_MS_VERSION,
    },
    {"name": "Unit Ontology", "uri": "http://purl.obolibrary.org/obo/uo.obo"},
]

_FILE_FORMATS = {
    "mzML": ("MS:1000584", "mzML format"),
    "mzML.gz": ("MS:1000584", "mzML format"),
    "mzXML": ("MS:1000566", "ISB mzXML format"),
    "MGF": ("MS:1001062", "Mascot MGF format"),
}

_COUNT = {"accession": "UO:0000189", "name": "count unit"}
_SECOND = {"accession": "UO:0000010", "name": "second"}
_MINUTE = {"accession": "UO:0000031", "name": "minute"}
_PPM = {"accession": "UO:0000169", "name": "parts per million"}


def _metric(
    accession: str, name: str, value: Any, unit: dict[str, str] | None, description: str = ""
) -> dict[str, Any]:
    out: dict[str, Any] = {"accession": accession, "name": name, "value": value}
    if description:
        out["description"] = description
    if unit is not None:
        out["unit"] = unit
    return out


def quality_metrics(metrics: RunMetrics) -> list[dict[str, Any]]:
    """The mzQC ``qualityMetrics`` of one run: only metrics that have a value and a CV term."""
    s = metrics.signal
    out = [
        _metric("MS:4000059", "number of MS1 spectra", s.ms1_count, _COUNT),
        _metric("MS:4000060", "number of MS2 spectra", s.ms2_count, _COUNT),
    ]
    if s.rt_start_s is not None and s.rt_end_s is not None:
        out.append(
            _metric(
                "MS:4000070",
                "retention time acquisition range",
                [s.rt_start_s, s.rt_end_s],
                _SECOND,
            )
        )
        out.append(_metric("MS:4000067", "MS run duration", s.rt_end_s - s.rt_start_s, _SECOND))
    if s.cycle_time_s_median is not None:
        out.append(_metric("MS:4000192", "MS1 median cycle time", s.cycle_time_s_median, _SECOND))
    quartiles = (s.tic_rt25_s, s.tic_rt50_s, s.tic_rt75_s)
    if all(q is not None for q in quartiles):
        # The term counts time from acquisition start, which is what scan start time (RT) is.
        out.append(
            _metric(
                "MS:4000190",
                "MS1 TIC quantile RT",
                [q / 60.0 for q in quartiles if q is not None],
                _MINUTE,
                "RT by which 25 %, 50 % and 75 % of the MS1 TIC has eluted",
            )
        )
    known = [(charge, n) for charge, n in s.precursor_charges if charge > 0 and n > 0]
    total_known = sum(n for _, n in known)
    if total_known:
        out.append(
            _metric(
                "MS:4000063",
                "MS2 known precursor charges fractions",
                {
                    "MS:1000041": [charge for charge, _ in known],
                    "UO:0000191": [n / total_known for _, n in known],
                },
                None,
            )
        )
    for cal in metrics.calibrants:
        if cal.median_ppm is None:
            continue
        out.append(
            _metric(
                "MS:4000072",
                "observed mass accuracy",
                cal.median_ppm,
                _PPM,
                f"median over MS1 scans of calibrant {cal.name} (m/z {cal.mz:.6f})",
            )
        )
    return [m for m in out if _is_finite(m["value"])]


def _is_finite(value: Any) -> bool:
    if isinstance(value, float):
        return math.isfinite(value)
    if isinstance(value, list):
        return all(_is_finite(v) for v in value)
    if isinstance(value, dict):
        return all(_is_finite(v) for v in value.values())
    return True


def _input_file(verdict: Verdict, metrics: RunMetrics) -> dict[str, Any]:
    accession, name = _FILE_FORMATS.get(metrics.format, ("MS:1000584", "mzML format"))
    entry: dict[str, Any] = {
        "name": shown(verdict.run_file.path.name),  # mzQC is UTF-8 JSON: no lone surrogates
        "location": Path(os.path.abspath(verdict.run_file.path)).as_uri(),
        "fileFormat": {"accession": accession, "name": name},
    }
    if verdict.run_file.sha256:
        entry["fileProperties"] = [
            {"accession": "MS:1003151", "name": "SHA-256", "value": verdict.run_file.sha256}
        ]
    return entry


def build_mzqc(
    verdicts: Sequence[Verdict], *, created_at: datetime | None = None
) -> dict[str, Any]:
    """One mzQC document with a runQuality per measured run (unreadable runs have no metrics).

    Raises:
        ValueError: no verdict carries metrics (mzQC needs at least one runQuality).
    """
    stamp = (created_at or datetime.now(tz=UTC)).astimezone(UTC)
    software = {
        "accession": "MS:1000799",
        "name": "custom unreleased software tool",
        "version": __version__,
        "value": "ionwarden",
    }
    runs: list[dict[str, Any]] = []
    labels: set[str] = set()
    for verdict in verdicts:
        metrics = verdict.metrics
        if metrics is None:
            continue
        label = shown(verdict.run_file.path.name)
        while label in labels:  # labels must be unique; same name in two folders
            label += "'"
        labels.add(label)
        runs.append(
            {
                "metadata": {
                    "label": label,
                    "inputFiles": [_input_file(verdict, metrics)],
                    "analysisSoftware": [software],
                },
                "qualityMetrics": quality_metrics(metrics),
            }
        )
    if not runs:
        raise ValueError("no measured run to write as mzQC")
    return {
        "mzQC": {
            "version": MZQC_VERSION,
            "creationDate": stamp.strftime("%Y-%m-%dT%H:%M:%SZ"),
            "description": "Run metrics measured by ionwarden",
            "controlledVocabularies": _CONTROLLED_VOCABULARIES,
            "runQualities": runs,
        }
    }


def write_mzqc(
    path: Path, verdicts: Sequence[Verdict], *, created_at: datetime | None = None
) -> None:
    """Write ``build_mzqc(verdicts)`` to ``path`` (atomically: temp file, then rename)."""
    document = build_mzqc(verdicts, created_at=created_at)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(document, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    tmp.replace(path)
