"""mzQC output: schema-valid, CV-correct, and carrying the run's values under the right terms."""

from __future__ import annotations

import copy
import csv
import gzip
import json
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import jsonschema
import pytest

from tests.helpers.refdata import REFERENCE as SHARED_REFERENCE
from watcher.measure.mzqc import build_mzqc, write_mzqc
from watcher.records import (
    CalibrantDrift,
    RunFile,
    RunMetrics,
    SignalMetrics,
    Status,
    Verdict,
)

REFERENCE = SHARED_REFERENCE
CREATED = datetime(2026, 3, 2, 9, 0, tzinfo=UTC)


def _verdict(
    name: str = "QC_0302.mzML", *, fmt: str = "mzML", with_metrics: bool = True
) -> Verdict:
    signal = SignalMetrics(
        ms1_count=450,
        ms2_count=1350,
        rt_start_s=0.0,
        rt_end_s=899.5,
        tic_median=3.1e7,
        bpi_median=4.0e5,
        dropouts=0,
        longest_dropout_s=0.0,
        cycle_time_s_median=2.0,
        tic_rt25_s=225.0,
        tic_rt50_s=450.0,
        tic_rt75_s=675.0,
        precursor_charges=((0, 10), (1, 40), (2, 150), (3, 50)),
    )
    metrics = RunMetrics(
        file=name,
        format=fmt,
        acquired_at=datetime(2026, 3, 2, 8, 0, tzinfo=UTC),
        signal=signal,
        calibrants=(
            CalibrantDrift(
                name="siloxane-445",
                mz=445.120025,
                median_ppm=2.0,
                mad_ppm=0.1,
                p05_ppm=1.8,
                p95_ppm=2.2,
                found_fraction=1.0,
                median_intensity=2e5,
                slope_ppm_per_h=0.5,
            ),
            CalibrantDrift(
                name="leu-enk",
                mz=556.276575,
                median_ppm=None,
                mad_ppm=None,
                p05_ppm=None,
                p95_ppm=None,
                found_fraction=0.0,
                median_intensity=None,
                slope_ppm_per_h=None,
            ),
        ),
    )
    return Verdict(
        run_file=RunFile(
            path=Path("/data/exports") / name, size=1000, mtime_ns=1, sha256="ab" * 32
        ),
        status=Status.OK if with_metrics else Status.UNREADABLE,
        acquired_at=datetime(2026, 3, 2, 8, 0, tzinfo=UTC),
        metrics=metrics if with_metrics else None,
        error=None if with_metrics else f"{name}: unreadable: truncated",
    )


def _schema() -> dict[str, Any]:
    # HUPO-PSI mzQC schema v1.0.0 (reference/mzqc/mzqc_schema.json, CC BY 4.0)
    return json.loads((REFERENCE / "mzqc" / "mzqc_schema.json").read_text())


def _obo_names() -> dict[str, str]:
    names: dict[str, str] = {}
    current = None
    with gzip.open(REFERENCE / "cv" / "psi-ms-4.1.257.obo.gz", "rt", encoding="utf-8") as fh:
        for line in fh:
            if line.startswith("id: "):
                current = line[4:].strip()
            elif line.startswith("name: ") and current:
                names[current] = line[6:].strip()
                current = None
    return names


def _uo_names() -> dict[str, str]:
    # The UO names as the reference extract lists them in its units column (psi-ms-qc-terms.tsv).
    names: dict[str, str] = {}
    with (REFERENCE / "psi-ms-qc-terms.tsv").open(encoding="utf-8") as fh:
        rows = csv.DictReader((line for line in fh if not line.startswith("#")), delimiter="\t")
        for row in rows:
            for cell in (row["units"], row["columns"]):
                for part in (cell or "").split(";"):
                    acc, _, name = part.strip().partition(" ")
                    if acc.startswith("UO:"):
                        names[acc] = name
    return names


def _cv_params(node: Any) -> list[tuple[str, str]]:
    found: list[tuple[str, str]] = []
    if isinstance(node, dict):
        if "accession" in node and "name" in node:
            found.append((node["accession"], node["name"]))
        for value in node.values():
            found += _cv_params(value)
    elif isinstance(node, list):
        for value in node:
            found += _cv_params(value)
    return found


def test_document_validates_against_the_mzqc_schema(tmp_path: Path) -> None:
    """A written mzQC file passes the official mzQC 1.0 JSON schema (Draft 7)."""
    path = tmp_path / "runs.mzQC"
    write_mzqc(path, [_verdict(), _verdict("S01_0302.mzXML", fmt="mzXML")], created_at=CREATED)
    document = json.loads(path.read_text())
    validator = jsonschema.Draft7Validator(_schema(), format_checker=jsonschema.FormatChecker())
    assert list(validator.iter_errors(document)) == []
    assert len(document["mzQC"]["runQualities"]) == 2


def test_the_validator_can_fail_on_our_document() -> None:
    """Without metadata.label the same document is rejected (the check is not vacuous)."""
    document = build_mzqc([_verdict()], created_at=CREATED)
    broken = copy.deepcopy(document)
    del broken["mzQC"]["runQualities"][0]["metadata"]["label"]
    assert list(jsonschema.Draft7Validator(_schema()).iter_errors(broken))


def test_every_accession_exists_in_the_cv_with_the_same_name() -> None:
    """Each accession used is a PSI-MS (4.1.257 obo) or UO term, under its CV name."""
    document = build_mzqc([_verdict(), _verdict("S2.mgf", fmt="MGF")], created_at=CREATED)
    obo, uo = _obo_names(), _uo_names()
    params = _cv_params(document)
    assert len(params) > 10
    for accession, name in params:
        expected = uo.get(accession) if accession.startswith("UO:") else obo.get(accession)
        assert expected == name, accession


def test_values_sit_under_their_terms() -> None:
    """Counts, RT range, cycle time, TIC quartiles, charges and calibrant ppm map as documented."""
    run = build_mzqc([_verdict()], created_at=CREATED)["mzQC"]["runQualities"][0]
    by_acc: dict[str, list[Any]] = {}
    for metric in run["qualityMetrics"]:
        by_acc.setdefault(metric["accession"], []).append(metric["value"])
    assert by_acc["MS:4000059"] == [450]
    assert by_acc["MS:4000060"] == [1350]
    assert by_acc["MS:4000070"] == [[0.0, 899.5]]
    assert by_acc["MS:4000067"] == [899.5]
    assert by_acc["MS:4000192"] == [2.0]
    assert by_acc["MS:4000190"] == [[3.75, 7.5, 11.25]]
    # known charges only (charge 0 = unknown is left out): 40 + 150 + 50 = 240
    table = by_acc["MS:4000063"][0]
    assert table["MS:1000041"] == [1, 2, 3]
    assert table["UO:0000191"] == pytest.approx([40 / 240, 150 / 240, 50 / 240])
    # one observed-mass-accuracy entry per calibrant that was found; leu-enk was not
    assert by_acc["MS:4000072"] == [2.0]
    software = run["metadata"]["analysisSoftware"][0]
    assert software["accession"] == "MS:1000799"
    assert run["metadata"]["inputFiles"][0]["fileProperties"][0]["value"] == "ab" * 32


def test_unreadable_runs_are_left_out_and_none_at_all_is_an_error() -> None:
    """Runs without metrics get no runQuality; with no measured run there is nothing to write."""
    document = build_mzqc(
        [_verdict(), _verdict("bad.mzML", with_metrics=False)], created_at=CREATED
    )
    labels = [r["metadata"]["label"] for r in document["mzQC"]["runQualities"]]
    assert labels == ["QC_0302.mzML"]
    with pytest.raises(ValueError, match="no measured run"):
        build_mzqc([_verdict("bad.mzML", with_metrics=False)], created_at=CREATED)


def test_intro_example_still_validates_with_our_schema_setup() -> None:
    """The mzQC project's own intro example validates with the validator set up as ours is."""
    example = json.loads((REFERENCE / "mzqc" / "intro_run.mzQC").read_text())
    validator = jsonschema.Draft7Validator(_schema(), format_checker=jsonschema.FormatChecker())
    assert list(validator.iter_errors(example)) == []
