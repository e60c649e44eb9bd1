"""The daemon keeps watching through what a lab's disks and shares throw at it: names that are
not UTF-8, a store that cannot be written, a health log that cannot be written, a store
re-created from scratch, copies of a run already judged. A real subprocess on real folders."""

from __future__ import annotations

import json
import os
import resource
import shutil
import time
from typing import TYPE_CHECKING

from tests.helpers.cli import run_cli
from tests.helpers.daemon import set_file_size_limit
from tests.helpers.wait import wait_for

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.daemon import Daemon, Lab
    from tests.helpers.receiver import Receiver

ODD_NAME = b"latin1_\xe9\xff.mzML"  # Latin-1 bytes, as a share written by another system has them
ODD_SHOWN = "latin1_\\xe9\\xff.mzML"  # how logs, the health log and status show it


def _wait_store_refused(d: Daemon) -> None:
    wait_for(
        lambda: any("STATUS=state store not writable" in m for m in d.notes()),
        60,
        "the STATUS= line saying the store is not writable",
    )


def test_a_name_that_is_not_utf8_is_judged_and_the_daemon_restarts(lab: Lab) -> None:
    """The odd name and its neighbours are judged; logs, health log and status show the bytes
    as \\xNN; a restart finds the job known (no second judgement, no crash)."""
    lab.drop("QC_before.mzML", 1)
    with open(os.fsencode(lab.exports) + b"/" + ODD_NAME, "wb") as fh:
        fh.write(lab.run_bytes(2))
    lab.drop("QC_after.mzML", 3)
    d = lab.start()
    lab.wait_runs(3)
    assert d.stop() == 0
    odd = os.fsdecode(ODD_NAME)
    assert sorted(lab.runs_by_name()) == sorted(["QC_before.mzML", odd, "QC_after.mzML"])
    assert {r["file"] for r in lab.health_runs()} == {"QC_before.mzML", ODD_SHOWN, "QC_after.mzML"}
    judged = [e for e in d.events() if e["event"] == "run.judged"]
    assert ODD_SHOWN in {os.path.basename(e["file"]) for e in judged}
    status = run_cli("status", "-c", lab.config, "--json")
    assert status.returncode == 0, status.stderr
    assert ODD_SHOWN in {r["file"] for r in json.loads(status.stdout)["last_runs"]}
    d2 = lab.start()
    lab.drop("QC_later.mzML", 4)
    lab.wait_runs(4)
    assert d2.stop() == 0
    assert lab.runs_by_name()[odd] == 1
    assert "Traceback" not in d.stderr() + d2.stderr()


def test_check_record_takes_a_name_that_is_not_utf8(lab: Lab) -> None:
    """``ionwarden check --record`` on the odd name: recorded, shown escaped, exit 0."""
    path = os.fsencode(lab.exports) + b"/" + ODD_NAME
    with open(path, "wb") as fh:
        fh.write(lab.run_bytes(5))
    done = run_cli("check", "-c", lab.config, "--record", os.fsdecode(path))
    assert done.returncode == 0, done.stderr
    assert ODD_SHOWN in done.stdout
    assert lab.runs_by_name() == {os.fsdecode(ODD_NAME): 1}


def _remove_store(lab: Lab) -> None:
    for path in lab.state.glob("ionwarden.sqlite3*"):
        path.unlink()


def test_after_the_store_is_recreated_new_runs_get_their_health_line(lab: Lab) -> None:
    """Run ids start again at 1 in a new store: the next run's line is still written, and the
    run already logged (same file, same content) is not logged a second time."""
    lab.drop("QC_first.mzML", 1)
    d = lab.start()
    lab.wait_runs(1)
    wait_for(lambda: len(lab.health_runs()) == 1, 10, "the first health line")
    assert d.stop() == 0
    _remove_store(lab)  # the health folder stays
    d2 = lab.start()
    lab.drop("QC_second.mzML", 2)
    lab.wait_runs(2)
    wait_for(lambda: len(lab.health_runs()) == 2, 10, "the second run's health line")
    assert d2.stop() == 0
    lines = lab.health_runs()
    assert [(r["file"], r["run_id"]) for r in lines] == [
        ("QC_first.mzML", 1),
        ("QC_second.mzML", 2),
    ]
    assert lines[0]["run_key"] != lines[1]["run_key"]


def test_after_the_store_is_recreated_run_id_1_again_gets_its_line(lab: Lab) -> None:
    """The sharpest case: the old store's run 1 is gone from the folder, and the new store's
    run 1 is another file; it still gets its line."""
    lab.drop("QC_first.mzML", 1)
    d = lab.start()
    wait_for(lambda: len(lab.health_runs()) == 1, 20, "the first health line")
    assert d.stop() == 0
    _remove_store(lab)
    (lab.exports / "QC_first.mzML").unlink()
    lab.drop("QC_other.mzML", 2)
    d2 = lab.start()
    wait_for(lambda: len(lab.health_runs()) == 2, 20, "the new store's first run's line")
    assert d2.stop() == 0
    assert [(r["file"], r["run_id"]) for r in lab.health_runs()] == [
        ("QC_first.mzML", 1),
        ("QC_other.mzML", 1),
    ]


def test_a_health_line_that_cannot_be_written_is_owed_and_written_later(lab: Lab) -> None:
    """A file where the health folder should be (root ignores permission bits, not this): the
    run is judged and its job done, not failed; once the folder can be made, the line comes."""
    lab.state.mkdir()
    blocker = lab.state / "health"
    blocker.write_text("not a folder")
    d = lab.start()
    lab.drop("QC_owed.mzML", 1)
    lab.wait_runs(1)
    wait_for(
        lambda: ("QC_owed.mzML", "done", "ok") in lab.jobs(), 10, "the job done with its verdict"
    )
    wait_for(
        lambda: any(e["event"] == "healthlog.write_failed" for e in d.events()), 10, "the warning"
    )
    blocker.unlink()
    wait_for(lambda: len(lab.health_runs()) == 1, 20, "the owed line, once the folder works")
    assert lab.health_runs()[0]["file"] == "QC_owed.mzML"
    assert any(e["event"] == "healthlog.caught_up" for e in d.events())
    assert d.stop() == 0
    assert [j[1] for j in lab.jobs()] == ["done"]
    d2 = lab.start()  # nothing owed any more: a restart writes no second line
    assert d2.stop() == 0
    assert len(lab.health_runs()) == 1


def test_a_health_line_owed_at_a_stop_is_written_at_the_next_start(lab: Lab) -> None:
    """Owed when the daemon stops: the note is in the store, the next start writes the line."""
    lab.state.mkdir()
    blocker = lab.state / "health"
    blocker.write_text("not a folder")
    d = lab.start()
    lab.drop("QC_owed.mzML", 1)
    lab.wait_runs(1)
    assert d.stop() == 0
    assert lab.health_runs() == []
    blocker.unlink()
    d2 = lab.start()
    wait_for(lambda: len(lab.health_runs()) == 1, 10, "the owed line at start-up")
    assert d2.stop() == 0


def test_a_copy_of_a_judged_run_shows_in_status_and_the_health_log(lab: Lab) -> None:
    """Same content under another name: no second run and no alert (by design), but the
    operator sees that it arrived: ``status`` lists it as a duplicate, the health log too."""
    d = lab.start()
    lab.drop("QC_a.mzML", 1)
    lab.wait_runs(1)
    shutil.copy(lab.exports / "QC_a.mzML", lab.exports / "QC_a_copy.mzML")
    wait_for(lambda: ("QC_a_copy.mzML", "done", "duplicate") in lab.jobs(), 10, "the duplicate job")
    wait_for(
        lambda: any(r.get("kind") == "run.duplicate" for r in lab.health()), 10, "its health line"
    )
    assert d.stop() == 0
    (line,) = [r for r in lab.health() if r.get("kind") == "run.duplicate"]
    assert line["fields"]["file"] == "QC_a_copy.mzML"
    assert line["fields"]["duplicate_of"] == "QC_a.mzML"
    status = run_cli("status", "-c", lab.config, "--json")
    assert status.returncode == 0, status.stderr
    files = {f["file"]: f for f in json.loads(status.stdout)["recent_files"]}
    assert files["QC_a_copy.mzML"]["note"] == "duplicate of QC_a.mzML"
    assert files["QC_a.mzML"]["note"] is None
    human = run_cli("status", "-c", lab.config)
    assert "QC_a_copy.mzML  duplicate of QC_a.mzML" in human.stdout


def test_a_store_that_refuses_writes_is_reported_retried_and_recovered(
    lab: Lab, big_run: Path, receiver: Receiver
) -> None:
    """The run being measured when the disk fills cannot be committed, and a file that arrives
    meanwhile cannot be queued: the daemon stays up, says ``state store not writable`` (STATUS=
    and one alert, sent past the outbox), and once writes work again judges both, each once,
    and says so through the outbox."""
    lab.write_config(alerts={"channels": [{"name": "lab-chat", "url": receiver.url()}]})
    d = lab.start()
    lab.drop("QC_before.mzML", 1)
    lab.wait_runs(1)
    shutil.copy(big_run, lab.exports / "QC_big.mzML")
    wait_for(lambda: ("QC_big.mzML", "measuring", None) in lab.jobs(), 20, "measuring state")
    set_file_size_limit(d.proc.pid, 0)
    try:
        # Nothing else writes while the run is measured: this STATUS= is the refused commit.
        _wait_store_refused(d)
        (alert,) = receiver.wait_for(1, timeout_s=20)
        assert "state store not writable" in str(alert["title"])
        lab.drop("QC_during.mzML", 2)  # settles, and cannot be queued
        time.sleep(2.0)  # retries meanwhile: still one alert, the daemon still up
        assert d.proc.poll() is None
        assert len(receiver.bodies) == 1
        assert lab.runs_by_name() == {"QC_before.mzML": 1}
        assert ("QC_during.mzML", "queued", None) not in lab.jobs()
    finally:
        set_file_size_limit(d.proc.pid, resource.RLIM_INFINITY)
    lab.wait_runs(3, timeout_s=90)
    assert lab.runs_by_name() == {"QC_before.mzML": 1, "QC_big.mzML": 1, "QC_during.mzML": 1}
    assert lab.attempts("QC_big.mzML") == 2  # its refused commit put it back in the queue
    bodies = receiver.wait_for(2, timeout_s=20)
    assert "writable again" in str(bodies[1]["title"])
    wait_for(lambda: len(lab.health_runs()) == 3, 20, "every run's health line")
    wait_for(
        lambda: not any("not writable" in m for m in d.notes()[-1:]), 10, "STATUS= back to normal"
    )
    assert d.stop() == 0
    assert any(e["event"] == "store.recovered" for e in d.events())


def test_a_store_that_refuses_writes_at_start_up_is_waited_for(
    lab: Lab, receiver: Receiver
) -> None:
    """Started on a full disk (as systemd restarts it; SQLite cannot even set up its -shm file):
    no exit, which would burn systemd's start limit; READY=1 with the reason in STATUS=, one
    alert, and once writes work the run that arrived while it was down is judged."""
    lab.write_config(alerts={"channels": [{"name": "lab-chat", "url": receiver.url()}]})
    d = lab.start()
    lab.drop("QC_1.mzML", 1)
    lab.wait_runs(1)
    assert d.stop() == 0
    lab.drop("QC_2.mzML", 2)
    d2 = lab.start(file_size_limit=0)
    try:
        wait_for(
            lambda: any("STATUS=state store not writable" in m for m in d2.notes()),
            20,
            "the STATUS= line saying the store is not writable",
        )
        (alert,) = receiver.wait_for(1, timeout_s=20)
        assert "state store not writable" in str(alert["title"])
        assert d2.proc.poll() is None
    finally:
        set_file_size_limit(d2.proc.pid, resource.RLIM_INFINITY)
    lab.wait_runs(2, timeout_s=90)
    bodies = receiver.wait_for(2, timeout_s=20)
    assert "writable again" in str(bodies[1]["title"])
    assert d2.stop() == 0
    assert lab.runs_by_name() == {"QC_1.mzML": 1, "QC_2.mzML": 1}


def test_a_store_that_refuses_writes_in_a_burst_loses_and_repeats_nothing(lab: Lab) -> None:
    """Two workers, 40 runs: the store refuses every write for 2 s while batches are being
    measured, claimed and committed (a commit, a claim or a duplicate check fails, with the
    next batch's children at work). Once writes work again every run is judged exactly once,
    none is failed or unreadable, and the daemon is still up."""
    count = 40
    names = [f"S{i:02d}.mzML" for i in range(count)]
    for i, name in enumerate(names):
        lab.drop(name, 100 + i)
    lab.write_config(limits={"workers": 2})
    d = lab.start()
    wait_for(lambda: len(lab.runs()) >= 4, 60, "a few judged runs")
    set_file_size_limit(d.proc.pid, 0)
    try:
        _wait_store_refused(d)
        time.sleep(2.0)
        assert d.proc.poll() is None
    finally:
        set_file_size_limit(d.proc.pid, resource.RLIM_INFINITY)
    lab.wait_runs(count, timeout_s=120)
    assert lab.runs_by_name() == dict.fromkeys(names, 1)
    assert {status for _, status, _ in lab.runs()} <= {"ok", "notice", "warning", "critical"}
    assert {state for _, state, _ in lab.jobs()} == {"done"}
    assert d.stop() == 0
