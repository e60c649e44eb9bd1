"""The daemon's Prometheus endpoint, scraped over HTTP from the real daemon and parsed with
prometheus_client's own parser (the format's reference implementation)."""

from __future__ import annotations

import os
import socket
import time
import urllib.request
from typing import TYPE_CHECKING

import pytest
from prometheus_client.parser import text_string_to_metric_families

from tests.helpers.daemon import Lab
from tests.helpers.floor import free_port, instrument_config, pyteomics_tic_median, write_run
from tests.helpers.wait import wait_for

if TYPE_CHECKING:
    from collections.abc import Iterator
    from pathlib import Path

    from tests.helpers.receiver import Receiver

NAME = "Larkfield Kestrel-3"


def scrape(port: int) -> dict[str, list[tuple[dict[str, str], float]]]:
    """name -> [(labels, value)] of every sample, as prometheus_client's parser reads them."""
    with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=10) as r:
        text = r.read().decode()
    out: dict[str, list[tuple[dict[str, str], float]]] = {}
    for family in text_string_to_metric_families(text):
        for sample in family.samples:
            out.setdefault(sample.name, []).append((dict(sample.labels), sample.value))
    return out


Samples = dict[str, list[tuple[dict[str, str], float]]]


def value(samples: Samples, name: str, **labels: str) -> float:
    rows = samples.get(name, [])
    hits = [v for lab, v in rows if all(lab.get(k) == x for k, x in labels.items())]
    assert len(hits) == 1, (name, labels, samples.get(name))
    return hits[0]


@pytest.fixture
def lab(tmp_path: Path, receiver: Receiver) -> Iterator[tuple[Lab, int]]:
    port = free_port()
    config = instrument_config(
        tmp_path,
        NAME,
        metrics={"listen": f"127.0.0.1:{port}"},
        alerts={"channels": [{"name": "chat", "url": receiver.url(), "min_severity": "warning"}]},
    )
    the_lab = Lab(
        root=tmp_path,
        exports=tmp_path / "exports",
        state=tmp_path / "state",
        config=config,
        template=b"",
    )
    yield the_lab, port
    for d in the_lab.procs:
        d.close()


def test_scrape_gives_each_number_of_the_last_runs(
    lab: tuple[Lab, int], receiver: Receiver, tmp_path: Path
) -> None:
    """After an ok run, a drifting run (+4.2 ppm: warning) and a cut-off file, one scrape of the
    real daemon shows the counts by status, the drifting run's calibrant error and ion, its TIC,
    the open warning, the delivered alert, an empty queue and the time since the last run."""
    the_lab, port = lab
    daemon = the_lab.start()
    exports = the_lab.exports
    write_run(tmp_path / "QC_001.mzML", offset_ppm=0.5, seed=1)
    os.replace(tmp_path / "QC_001.mzML", exports / "QC_001.mzML")
    the_lab.wait_runs(1)
    truth = write_run(tmp_path / "QC_002.mzML", offset_ppm=4.2, seed=2)
    tic_reference = pyteomics_tic_median(tmp_path / "QC_002.mzML")
    os.replace(tmp_path / "QC_002.mzML", exports / "QC_002.mzML")
    the_lab.wait_runs(2)
    cut = exports / "QC_003.mzML"
    cut.write_bytes((exports / "QC_001.mzML").read_bytes()[:50_000])  # an export cut off
    the_lab.wait_runs(3, timeout_s=60)
    receiver.wait_for(2, timeout_s=20)  # the drift warning and the unreadable run
    wait_for(
        lambda: value(scrape(port), "ionwarden_messages_pending", instrument=NAME) == 0,
        20,
        "no message pending",
    )
    samples = scrape(port)
    scraped_at = time.time()

    # Source: the runs dropped and the config's limits (±3 ppm warning, ±6 ppm critical).
    assert value(samples, "ionwarden_runs_judged_total", instrument=NAME, status="ok") == 1
    assert value(samples, "ionwarden_runs_judged_total", instrument=NAME, status="warning") == 1
    assert value(samples, "ionwarden_runs_unreadable_total", instrument=NAME) == 1
    assert value(samples, "ionwarden_last_run_status", instrument=NAME, status="unreadable") == 1
    assert value(samples, "ionwarden_last_run_status", instrument=NAME, status="ok") == 0
    # Source: synth ground truth, +4.2 ppm in every MS1 scan of QC_002 (the last run measured).
    ppm = value(
        samples, "ionwarden_calibrant_median_error_ppm", instrument=NAME, calibrant="siloxane-445"
    )
    assert ppm == pytest.approx(truth.calibrants["siloxane-445"].median_ppm, abs=0.05)
    assert value(samples, "ionwarden_expected_ion_found", instrument=NAME, ion="caffeine") == 1
    intensity = value(
        samples, "ionwarden_expected_ion_apex_intensity", instrument=NAME, ion="caffeine"
    )
    assert intensity == pytest.approx(truth.targets["caffeine"].apex_height, rel=0.05)
    # Source: pyteomics reading the same file (median of MS1 summed intensities).
    assert value(samples, "ionwarden_tic_median", instrument=NAME) == pytest.approx(
        tic_reference, rel=1e-6
    )
    # Source: the receiver, which got every message the daemon says it delivered.
    assert value(samples, "ionwarden_messages_delivered_total", instrument=NAME) == len(
        receiver.bodies
    )
    assert value(samples, "ionwarden_messages_failed_total", instrument=NAME) == 0
    assert value(samples, "ionwarden_queue_length", instrument=NAME) == 0
    assert value(samples, "ionwarden_open_alerts", instrument=NAME, severity="warning") >= 1
    assert (
        value(samples, "ionwarden_check_open_alerts", instrument=NAME, check="calibration drift")
        == 1
    )
    # The cut file has no acquisition time: its time is the file's mtime (from the file system).
    acquired = value(samples, "ionwarden_last_run_acquired_timestamp_seconds", instrument=NAME)
    assert acquired == pytest.approx(cut.stat().st_mtime, abs=1.0)
    since = value(samples, "ionwarden_since_last_run_seconds", instrument=NAME)
    assert 0 <= since <= scraped_at - acquired + 1.0
    # No label carries a file name: the series stay bounded however many runs arrive.
    labels = {v for rows in samples.values() for lab, _ in rows for v in lab.values()}
    assert not [v for v in labels if ".mzML" in v or "QC_0" in v]
    assert all(name.startswith("ionwarden_") for name in samples)
    daemon.stop()


def test_a_scraper_that_never_sends_does_not_stop_the_daemon(lab: tuple[Lab, int]) -> None:
    """Connections to the endpoint that send nothing leave the daemon judging runs and the
    endpoint answering other scrapers (it serves on its own threads)."""
    the_lab, port = lab
    the_lab.start()
    stalled = [socket.create_connection(("127.0.0.1", port), timeout=5) for _ in range(5)]
    try:
        write_run(the_lab.root / "QC_010.mzML", offset_ppm=0.2)
        os.replace(the_lab.root / "QC_010.mzML", the_lab.exports / "QC_010.mzML")
        the_lab.wait_runs(1, timeout_s=30)
        samples = scrape(port)
        assert value(samples, "ionwarden_runs_judged_total", instrument=NAME, status="ok") == 1
    finally:
        for s in stalled:
            s.close()


def test_a_port_in_use_is_logged_and_the_daemon_goes_on(lab: tuple[Lab, int]) -> None:
    """The endpoint's port taken by another program: the daemon logs metrics.failed and still
    judges runs (alerts matter more than the endpoint)."""
    the_lab, port = lab
    with socket.socket() as taken:
        taken.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        taken.bind(("127.0.0.1", port))
        taken.listen(1)
        daemon = the_lab.start()
        write_run(the_lab.root / "QC_020.mzML", offset_ppm=0.1)
        os.replace(the_lab.root / "QC_020.mzML", the_lab.exports / "QC_020.mzML")
        the_lab.wait_runs(1, timeout_s=30)
        failed = [e for e in daemon.events() if e.get("event") == "metrics.failed"]
        assert failed, daemon.stderr()[-2000:]
        assert failed[0]["listen"] == f"127.0.0.1:{port}"
