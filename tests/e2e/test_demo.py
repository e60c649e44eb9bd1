"""`ionwarden demo` end to end: the real daemon on demo_drop/, alerts via apprise to 127.0.0.1."""

from __future__ import annotations

import json
import re
from typing import TYPE_CHECKING

import pytest

from tests.helpers.cli import REPO, Result, run_cli

if TYPE_CHECKING:
    from pathlib import Path

TRUTH = json.loads((REPO / "demo_drop" / "TRUTH.json").read_text())["queue"]


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[Result, Path]:
    workdir = tmp_path_factory.mktemp("demo")
    proc = run_cli(
        "demo", "--workdir", workdir, "--fast", unset=["IONWARDEN_DEMO_URL"], timeout=240
    )
    return proc, workdir


def test_demo_exits_cleanly(demo: tuple[Result, Path]) -> None:
    """The demo finishes with exit 0 and says where its outputs are."""
    proc, workdir = demo
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    assert f"digest       {workdir / 'state'}" in proc.stdout
    assert "Traceback" not in proc.stdout + proc.stderr


def test_demo_alerts_arrive_in_the_scenario_order(
    demo: tuple[Result, Path],
) -> None:
    """The receiver gets exactly the scenario's alerts, in order: raise, escalate, clear, ..."""
    proc, _ = demo
    titles = re.findall(r">> ALERT  Kestrel-2 Q-TOF: (\S+) (\S+)", proc.stdout)
    # The scenario is ours (synth/demo_night.py); its intent is written down in demo_drop/TRUTH.json
    # and in README's demo table. Statuses in titles are the run's status.
    assert titles == [
        ("WARNING", "S04_plasma-A04.mzML"),  # drift passes +3 ppm
        ("CRITICAL", "QC_003_mix.mzML"),  # jumps to +6 ppm: escalation
        ("CRITICAL", "S05_plasma-A05.mzML"),  # recalibrated (drift clears), spray dropout raised
        ("OK", "S06_plasma-A06.mzML"),  # dropout clears
        ("CRITICAL", "QC_004_mix.mzML"),  # reserpine missing
        ("UNREADABLE", "QC_005_mix.mzML"),  # truncated export
        ("OK", "QC_006_mix.mzML"),  # missing-ion and unreadable alerts clear
    ]
    blocks = proc.stdout.split(">> ALERT")
    escalation = next(b for b in blocks if "QC_003_mix.mzML" in b.splitlines()[0])
    assert "WORSE critical" in escalation
    recovery = next(b for b in blocks if "S05_plasma-A05.mzML" in b.splitlines()[0])
    assert "OK AGAIN: calibration drift" in recovery
    assert "NEW critical" in recovery
    assert "dropout" in recovery
    last = blocks[-1]
    assert "OK AGAIN: expected ions" in last
    assert "OK AGAIN: unreadable" in last


def test_demo_verdicts_match_the_ground_truth(
    demo: tuple[Result, Path],
) -> None:
    """Every run's recorded status is the one the scenario's ground truth expects."""
    _, workdir = demo
    import sqlite3

    conn = sqlite3.connect(workdir / "state" / "ionwarden.sqlite3")
    got = dict(conn.execute("SELECT file_name, status FROM runs").fetchall())
    conn.close()
    want = {run["file"]: run["expect_status"] for run in TRUTH}
    assert got == want


def test_demo_reports_the_truncated_export_by_name(
    demo: tuple[Result, Path],
) -> None:
    """The cut-off export is reported unreadable, by name and reason, in the alert and the log."""
    proc, workdir = demo
    assert re.search(
        r"QC_005_mix\.mzML +arrives[^\n]*\n(  >>[^\n]*\n)*\s+judged +UNREADABLE", proc.stdout
    )
    assert "truncated while copying" in proc.stdout
    lines = [
        json.loads(line)
        for f in sorted((workdir / "state" / "health").glob("health-*.jsonl"))
        for line in f.read_text().splitlines()
    ]
    (rec,) = [r for r in lines if r.get("type") == "run" and r["file"] == "QC_005_mix.mzML"]
    assert rec["status"] == "unreadable"
    assert "</indexedmzML>" in rec["error"]


def test_demo_writes_the_digest(demo: tuple[Result, Path]) -> None:
    """The digest page exists, is self-contained and covers the evening's runs and findings."""
    _, workdir = demo
    html = (workdir / "state" / "digest-2026-11-27.html").read_text()
    assert "siloxane-445" in html
    assert "leu-enk" in html
    assert "QC_004_mix.mzML" in html
    assert "S05_plasma-A05.mzML" in html
    assert html.count("data:image/png;base64,") >= 3
    assert "<script src=" not in html
    assert "http://" not in html
    assert "https://" not in html


def test_demo_acknowledges_an_alert_and_records_an_event(demo: tuple[Result, Path]) -> None:
    """The person on call acknowledges the drift warning (the escalation is still sent, the
    order test above) and puts the re-calibration on the record: the daemon logs both, and the
    digest lists the event and draws it on its charts."""
    proc, workdir = demo
    assert "$ ionwarden ack --check" in proc.stdout
    assert "acknowledged: calibration drift, calibrant.siloxane-445.median_ppm (warning)" in (
        proc.stdout
    )
    assert "event 1 recorded: calibration at 2026-11-27 20:52" in proc.stdout
    kinds = [
        json.loads(line).get("kind")
        for f in sorted((workdir / "state" / "health").glob("health-*.jsonl"))
        for line in f.read_text().splitlines()
    ]
    assert "alert.acknowledged" in kinds
    assert "note.recorded" in kinds
    html = (workdir / "state" / "digest-2026-11-27.html").read_text()
    assert '<tr class="event"><td data-label="time">20:52</td>' in html
    assert "queued re-calibration ran" in html
    assert '<li class="ack">' in html
