"""A burst measured several runs at once (``limits.workers``) is judged as if one at a time.

The issue "Faster to the first alert" (item 3): after downtime the daemon measures up to
``limits.workers`` runs at once, while judging and the final transaction stay in order of
acquisition time, so baselines and alert sequences are the same as one at a time. The runs come
from the synthetic generator with a known calibrant offset each (ground truth in
``synth.CalibrantTruth``); the same folder is judged by a daemon with one worker and by one with
three, and everything the store holds that a person would see is compared.
"""

from __future__ import annotations

import os
import shutil
import sqlite3
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Any

import pytest

import synth
from tests.helpers.wait import wait_for

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.daemon import Lab
    from tests.helpers.receiver import Receiver

SILOXANE_MZ = 445.120025  # polysiloxane background ion [C2H6SiO]6+H+ (common practice, lock mass)
NIGHT = datetime(2026, 11, 27, 18, 0, tzinfo=UTC)
# ppm per run: in spec, out (warning), back, out again, far out (critical), back ...
OFFSETS_PPM = (0.0, 1.0, 4.0, 4.5, 0.5, -4.2, -7.0, 0.2, 6.5, 6.0, 0.1, 0.0)


def _write_runs(folder: Path, scratch: Path) -> list[str]:
    names = []
    for n, offset in enumerate(OFFSETS_PPM):
        spec = synth.RunSpec(
            duration_s=10,
            ms2_per_cycle=0,
            background_peaks=20,
            seed=n,
            calibrants=[
                synth.CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=offset)
            ],
            start_time=NIGHT + timedelta(minutes=25 * n),
        )
        name = f"QC_{n:02d}.mzML"
        synth.write_mzml(scratch / name, spec, indexed=False)
        shutil.move(scratch / name, folder / name)  # in acquisition order, as a queue writes
        names.append(name)
    return names


def _seen(lab: Lab) -> dict[str, Any]:
    """What the store says happened, in the order it happened."""
    conn = sqlite3.connect(f"file:{lab.state / 'ionwarden.sqlite3'}?mode=ro", uri=True)
    try:
        runs = conn.execute("SELECT file_name, status FROM runs ORDER BY run_id").fetchall()
        messages = conn.execute("SELECT kind, title FROM messages ORDER BY message_id").fetchall()
        findings = conn.execute("SELECT findings_json FROM runs ORDER BY run_id").fetchall()
    finally:
        conn.close()
    return {"runs": runs, "messages": messages, "findings": findings}


def _judge_all(lab: Lab, receiver: Receiver, workers: int, n: int) -> dict[str, Any]:
    lab.write_config(
        calibrants=[{"name": "siloxane-445", "mz": SILOXANE_MZ, "search_ppm": 30}],
        checks=[
            {
                "name": "calibration drift",
                "metric": "calibrant.*.median_ppm",
                "warning": {"outside": [-3, 3]},
                "critical": {"outside": [-5, 5]},
            }
        ],
        alerts={"channels": [{"name": "lab-chat", "url": receiver.url()}]},
        limits={"workers": workers},
    )
    d = lab.start()
    lab.wait_runs(n, timeout_s=120)
    assert d.stop() == 0
    return _seen(lab)


def test_three_workers_judge_a_burst_as_one_worker_does(
    lab: Lab, receiver: Receiver, tmp_path: Path
) -> None:
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    names = _write_runs(lab.exports, scratch)
    serial = _judge_all(lab, receiver, 1, len(names))
    shutil.rmtree(lab.state)
    parallel = _judge_all(lab, receiver, 3, len(names))
    assert [name for name, _ in parallel["runs"]] == names  # each once, in acquisition order
    assert parallel == serial
    # And the sequence is the right one: the ground-truth offsets against the +-3 / +-5 limits.
    expected = [
        "ok" if abs(p) <= 3 else "warning" if abs(p) <= 5 else "critical" for p in OFFSETS_PPM
    ]
    assert [status for _, status in serial["runs"]] == expected
    assert len(serial["messages"]) >= 4  # raised, escalated, cleared ... not one per run


def _drop_in_order(lab: Lab, contents: list[bytes]) -> list[str]:
    """Files S00.. with strictly rising mtimes: the order the daemon claims them in."""
    names = []
    base_ns = 1_790_000_000 * 10**9
    for i, body in enumerate(contents):
        path = lab.exports / f"S{i:02d}.mzML"
        path.write_bytes(body)
        os.utime(path, ns=(base_ns + i * 10**9, base_ns + i * 10**9))
        names.append(path.name)
    return names


@pytest.mark.timeout(120)  # a hang guard (speed is measured in bench/)
def test_a_twin_of_a_run_still_being_committed_is_linked_as_its_duplicate(lab: Lab) -> None:
    """Two workers: S00+S01, S02+S03, ... are claimed together, and the next pair is claimed
    and hashed while the previous one commits. S02 holds S00's bytes and S05 S03's: each must
    end as a duplicate of its original, not as a second run of the same content."""
    bodies = [lab.run_bytes(n) for n in range(8)]
    bodies[2] = bodies[0]
    bodies[5] = bodies[3]
    names = _drop_in_order(lab, bodies)
    lab.write_config(limits={"workers": 2})
    d = lab.start()
    wait_for(
        lambda: [state for _, state, _ in lab.jobs()].count("done") == len(names),
        60,
        "every job done",
    )
    assert d.stop() == 0
    outcomes = {name: outcome for name, _, outcome in lab.jobs()}
    assert outcomes["S02.mzML"] == "duplicate"
    assert outcomes["S05.mzML"] == "duplicate"
    assert sorted(lab.runs_by_name()) == [n for n in names if n not in ("S02.mzML", "S05.mzML")]
    assert set(lab.runs_by_name().values()) == {1}


@pytest.mark.timeout(180)  # a hang guard (speed is measured in bench/)
def test_a_burst_stopped_midway_is_judged_exactly_once_after_the_restart(lab: Lab) -> None:
    """SIGTERM while batches are measured and committed: what was committed stays, the rest
    goes back to the queue, and the next daemon judges each run once, in claim order."""
    count = 60
    names = _drop_in_order(lab, [lab.run_bytes(n) for n in range(count)])
    lab.write_config(limits={"workers": 2})
    d = lab.start()
    wait_for(lambda: len(lab.runs()) >= 6, 60, "a few judged runs")
    assert d.stop() == 0
    judged_before = len(lab.runs())
    states = {state for _, state, _ in lab.jobs()}
    assert states <= {"done", "queued"}  # nothing left "measuring", nothing failed
    d = lab.start()
    lab.wait_runs(count, timeout_s=120)
    assert d.stop() == 0
    assert lab.runs_by_name() == dict.fromkeys(names, 1)
    assert judged_before <= count
    conn = sqlite3.connect(f"file:{lab.state / 'ionwarden.sqlite3'}?mode=ro", uri=True)
    try:
        stored = [row[0] for row in conn.execute("SELECT file_name FROM runs ORDER BY run_id")]
    finally:
        conn.close()
    assert stored == names  # one at a time, in order, across the stop
