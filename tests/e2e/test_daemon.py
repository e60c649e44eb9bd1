"""The daemon end to end: a real subprocess on a real folder and SQLite file, judged exactly once.

Expectations come from the issue ("Watch") and docs/reliability.md items 2, 3, 5 and 7 (the
failure modes measured on this machine); run files come from the project's synthetic generator.
"""

from __future__ import annotations

import json
import os
import random
import re
import shutil
import signal
import time
from collections import Counter
from typing import TYPE_CHECKING, Any

import pytest

from tests.helpers.cli import run_cli
from tests.helpers.daemon import SETTLE_S, Daemon, Lab
from tests.helpers.wait import wait_for

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.receiver import Receiver


def _assert_once(lab: Lab, names: set[str]) -> None:
    by_name = lab.runs_by_name()
    assert {n: by_name.get(n, 0) for n in names} == dict.fromkeys(names, 1)
    health = Counter(r["file"] for r in lab.health_runs())
    assert {n: health.get(n, 0) for n in names} == dict.fromkeys(names, 1)


@pytest.mark.parametrize("polling", [False, True], ids=["inotify", "polling"])
def test_every_way_of_writing_is_judged_once(lab: Lab, polling: bool) -> None:
    """Chunks, tmp-then-rename, cp, mv from outside and a folder moved in: each judged once."""
    lab.write_config(watch={"polling": polling, "poll_interval_s": 0.2})
    d = lab.start()
    data = lab.run_bytes(1)
    with (lab.exports / "QC_chunks.mzML").open("wb") as fh:
        for i in range(0, len(data), 4096):
            fh.write(data[i : i + 4096])
            fh.flush()
    tmp = lab.exports / "QC_renamed.mzML.part"
    tmp.write_bytes(lab.run_bytes(2))
    tmp.rename(lab.exports / "QC_renamed.mzML")
    outside = lab.root / "outside"
    outside.mkdir()
    (outside / "S01_cp.mzML").write_bytes(lab.run_bytes(3))
    shutil.copy(outside / "S01_cp.mzML", lab.exports / "S01_cp.mzML")
    (outside / "S01_mv.mzML").write_bytes(lab.run_bytes(4))
    shutil.move(outside / "S01_mv.mzML", lab.exports / "S01_mv.mzML")
    batch = outside / "batch"
    batch.mkdir()
    (batch / "QC_in_folder.mzML").write_bytes(lab.run_bytes(5))
    os.rename(batch, lab.exports / "batch")
    names = {"QC_chunks.mzML", "QC_renamed.mzML", "S01_cp.mzML", "S01_mv.mzML", "QC_in_folder.mzML"}
    lab.wait_runs(len(names))
    assert d.stop() == 0
    _assert_once(lab, names)
    assert all(status == "ok" for _, status, _ in lab.runs())
    assert not any(name.endswith(".part") for name, _, _ in lab.jobs())


def test_slow_growth_never_alarms(lab: Lab) -> None:
    """A file growing in pauses shorter than settle_s, for longer than settle_s: judged once, ok."""
    d = lab.start()
    data = lab.run_bytes(1)
    path = lab.exports / "QC_slow.mzML"
    pieces = 8
    step = len(data) // pieces + 1
    start = time.monotonic()
    with path.open("wb") as fh:
        for i in range(pieces):
            fh.write(data[i * step : (i + 1) * step])
            fh.flush()
            time.sleep(SETTLE_S * 0.5)  # the writer's pace, below settle_s
    assert time.monotonic() - start > 2 * SETTLE_S
    runs = lab.wait_runs(1)
    assert runs == [("QC_slow.mzML", "ok", None)]
    assert d.stop() == 0
    _assert_once(lab, {"QC_slow.mzML"})


def test_preallocated_nul_tail_waits_for_content(lab: Lab) -> None:
    """At final size but NUL-filled is not whole (RELIABILITY 2); judged once when completed."""
    d = lab.start()
    data = lab.run_bytes(1)
    path = lab.exports / "QC_prealloc.mzML"
    with path.open("wb") as fh:
        fh.write(data[:100])
        fh.write(b"\0" * (len(data) - 100))
    # Settled by size and mtime, yet not whole: it must still be waiting after several settle_s
    # (proving a negative takes time; four settle periods are enough for a wrong "ready").
    time.sleep(4 * SETTLE_S)
    assert lab.jobs() == []
    with path.open("r+b") as fh:
        fh.write(data)
    runs = lab.wait_runs(1)
    assert runs == [("QC_prealloc.mzML", "ok", None)]
    assert d.stop() == 0


def test_burst_of_500_files(lab: Lab) -> None:
    """500 small files dropped at once are all judged, each exactly once."""
    d = lab.start()
    names = {f"S{i:04d}_burst.mzML" for i in range(500)}
    for i, name in enumerate(sorted(names)):
        lab.drop(name, i)
    lab.wait_runs(500, timeout_s=90)
    assert d.stop() == 0
    _assert_once(lab, names)


def test_caught_up_after_downtime_and_changed_file_again(lab: Lab) -> None:
    """Files dropped while stopped are judged at start; a file changed in place is judged again."""
    d = lab.start()
    lab.drop("QC_before.mzML", 1)
    lab.wait_runs(1)
    assert d.stop() == 0
    for i in range(5):
        lab.drop(f"S{i}_while_down.mzML", 10 + i)
    (lab.exports / "QC_before.mzML").write_bytes(lab.run_bytes(99))  # new content, same name
    d2 = lab.start()
    lab.wait_runs(7)
    assert d2.stop() == 0
    counts = lab.runs_by_name()
    assert counts["QC_before.mzML"] == 2
    assert all(counts[f"S{i}_while_down.mzML"] == 1 for i in range(5))


def test_same_content_under_another_name_is_a_duplicate(lab: Lab) -> None:
    """A copy of a judged run under a new name is recognised by its hash, not measured again."""
    d = lab.start()
    lab.drop("QC_a.mzML", 1)
    lab.wait_runs(1)
    shutil.copy(lab.exports / "QC_a.mzML", lab.exports / "QC_a_copy.mzML")
    wait_for(lambda: ("QC_a_copy.mzML", "done", "duplicate") in lab.jobs(), 10, "the duplicate job")
    assert d.stop() == 0
    assert lab.runs_by_name() == {"QC_a.mzML": 1}
    assert any(e["event"] == "run.duplicate" for e in d.events())


def test_kill9_during_measurement_then_restart(lab: Lab, big_run: Path) -> None:
    """kill -9 while a larger run is measured; after restart it is judged exactly once."""
    d = lab.start()
    shutil.copy(big_run, lab.exports / "QC_big.mzML")
    wait_for(lambda: ("QC_big.mzML", "measuring", None) in lab.jobs(), 20, "measuring state")
    d.kill9()
    assert lab.runs() == []
    d2 = lab.start()
    lab.wait_runs(1, timeout_s=60)
    assert d2.stop() == 0
    _assert_once(lab, {"QC_big.mzML"})
    assert lab.runs()[0][1] != "unreadable"


def _kill_measuring_child(lab: Lab, d: Daemon, name: str, not_pid: int | None = None) -> int:
    """SIGKILL the daemon's child while it has the run open (as a person or a cgroup would)."""
    found: list[int] = []

    def measuring() -> bool:
        pid = d.child_reading(name)
        if pid is not None and pid != not_pid:
            found.append(pid)
        return bool(found)

    wait_for(measuring, 30, f"a measuring child reading {name}")
    os.kill(found[0], signal.SIGKILL)
    return found[0]


def test_killed_measuring_child_measures_the_run_again(lab: Lab, big_run: Path) -> None:
    """SIGKILL of the measuring child mid-run (not its memory limit, no OOM kill counted): the
    run is measured once more in a fresh child and judged normally, exactly once."""
    d = lab.start()
    shutil.copy(big_run, lab.exports / "QC_big.mzML")
    _kill_measuring_child(lab, d, "QC_big.mzML")
    (run,) = lab.wait_runs(1, timeout_s=60)
    assert d.stop() == 0
    assert run[:2] == ("QC_big.mzML", "ok"), run
    _assert_once(lab, {"QC_big.mzML"})
    killed = [e for e in d.events() if e["event"] == "child.killed"]
    assert [e["reason"] for e in killed] == ["measuring process was killed (signal 9)"]


def test_measuring_child_killed_twice_is_unreadable_killed(lab: Lab, big_run: Path) -> None:
    """Killed again while measuring the run a second time: unreadable 'killed', not memory."""
    d = lab.start()
    shutil.copy(big_run, lab.exports / "QC_big.mzML")
    first = _kill_measuring_child(lab, d, "QC_big.mzML")
    _kill_measuring_child(lab, d, "QC_big.mzML", not_pid=first)
    (run,) = lab.wait_runs(1, timeout_s=60)
    assert d.stop() == 0
    assert run == ("QC_big.mzML", "unreadable", "measuring process was killed (signal 9)")
    assert "out of memory" not in d.stderr()
    assert lab._query("SELECT error_kind FROM runs") == [("killed",)]


def test_random_kill_loop_over_100_runs(lab: Lab) -> None:
    """kill -9 at random moments over 100 runs: none ends with zero or two records (RELIAB. 5)."""
    rng = random.Random(20261201)
    names = {f"S{i:03d}_kill.mzML" for i in range(100)}
    for i, name in enumerate(sorted(names)):
        lab.drop(name, i)
    for _ in range(6):
        d = lab.start()
        time.sleep(rng.uniform(0.05, 0.8))  # the random kill moment itself
        d.kill9()
    d = lab.start()
    lab.wait_runs(100, timeout_s=60)
    assert d.stop() == 0
    _assert_once(lab, names)
    health_ids = [r["run_id"] for r in lab.health_runs()]
    assert len(health_ids) == len(set(health_ids))


@pytest.mark.parametrize(
    "n_files",
    [2000, pytest.param(10000, marks=[pytest.mark.slow, pytest.mark.timeout(1200)], id="10000")],
)
def test_sigstop_then_many_files(lab: Lab, n_files: int) -> None:
    """SIGSTOP, thousands of new files (inotify may overflow), SIGCONT: each judged exactly once."""
    d = lab.start()
    d.signal(signal.SIGSTOP)
    try:
        names = [f"S{i:05d}_paused.mzML" for i in range(n_files)]
        for i, name in enumerate(names):
            lab.drop(name, i)
    finally:
        d.signal(signal.SIGCONT)
    lab.wait_runs(n_files, timeout_s=60 + n_files * 0.1)
    assert d.stop() == 0
    _assert_once(lab, set(names))


def test_time_limit_kills_child_and_daemon_goes_on(lab: Lab, big_run: Path) -> None:
    """A run past the wall-clock limit is unreadable 'timeout after N s'; the next run is judged."""
    # The big run takes about a second to measure here (0.9 s CPU), the tiny one about 0.02 s.
    lab.write_config(limits={"parse_timeout_s": 0.2, "parse_timeout_s_per_gb": 0})
    d = lab.start()
    shutil.copy(big_run, lab.exports / "QC_slow_parse.mzML")
    lab.wait_runs(1, timeout_s=30)
    # The daemon goes on: the next run is measured under a limit any machine meets (a 0.2 s
    # wall-clock limit would also catch the tiny run on a loaded machine), set by a reload.
    lab.write_config(limits={"parse_timeout_s": 60})
    d.signal(signal.SIGHUP)
    wait_for(lambda: any(e["event"] == "config.reloaded" for e in d.events()), 10, "reload")
    lab.drop("QC_after.mzML", 1)
    runs = {name: (status, error) for name, status, error in lab.wait_runs(2, timeout_s=30)}
    assert d.stop() == 0
    assert runs["QC_slow_parse.mzML"] == ("unreadable", "timeout after 0.2 s")
    assert runs["QC_after.mzML"][0] == "ok"


def test_never_completing_file_is_unreadable_with_alert(lab: Lab, receiver: Receiver) -> None:
    """A cut-off export that stops changing: unreadable 'incomplete: ...' with how long it has
    been unchanged, and its alert at the receiver within stall_s + settle_s + 2 s of the write."""
    stall_s = 2.0
    lab.write_config(
        watch={"stall_s": stall_s},
        alerts={"channels": [{"name": "lab-chat", "url": receiver.url()}]},
    )
    d = lab.start()
    data = lab.run_bytes(1)
    (lab.exports / "QC_cut.mzML").write_bytes(data[: len(data) // 2])
    written = time.monotonic()
    wait_for(lambda: receiver.bodies, 15, "the alert at the receiver")
    elapsed_s = time.monotonic() - written
    assert elapsed_s <= stall_s + SETTLE_S + 2.0, elapsed_s
    runs = lab.wait_runs(1)
    assert runs[0][0:2] == ("QC_cut.mzML", "unreadable")
    assert re.fullmatch(r"incomplete: .+, still so after \d+ s", str(runs[0][2]))
    assert "QC_cut.mzML" in str(receiver.bodies[0])
    assert d.stop() == 0


def test_sighup_with_broken_config_keeps_old(lab: Lab) -> None:
    """SIGHUP with a broken config: rejected in the log and health log, the old config works on."""
    d = lab.start()
    good = lab.config.read_text()
    lab.config.write_text("watch: {settle_s: [oops\n")
    d.signal(signal.SIGHUP)
    wait_for(lambda: any(e["event"] == "config.rejected" for e in d.events()), 10, "rejection")
    lab.drop("QC_after_hup.mzML", 1)
    assert lab.wait_runs(1)[0][:2] == ("QC_after_hup.mzML", "ok")
    assert any(r.get("kind") == "config.rejected" for r in lab.health())
    lab.config.write_text(good)
    d.signal(signal.SIGHUP)
    wait_for(lambda: any(e["event"] == "config.reloaded" for e in d.events()), 10, "reload")
    assert d.stop() == 0


def test_notify_protocol_and_clean_stop(lab: Lab) -> None:
    """READY=1 after start, STATUS= with the queue, WATCHDOG=1 pings, STOPPING=1 and exit 0 fast."""
    d = lab.start(env={"WATCHDOG_USEC": "400000"})
    lab.drop("QC_1.mzML", 1)
    lab.wait_runs(1)
    wait_for(lambda: any(m.startswith("STATUS=") and "QC_1" in m for m in d.notes()), 10, "STATUS")
    wait_for(lambda: d.notes().count("WATCHDOG=1") >= 2, 5, "two watchdog pings")
    assert d.stop(timeout_s=10) == 0  # a stop that hangs fails inside stop()
    assert "STOPPING=1" in d.notes()


def test_file_name_cannot_inject_notify_commands(lab: Lab) -> None:
    """A run named 'inj\\nWATCHDOG=trigger\\nMAINPID=1\\nx.mzML' is judged and shown in STATUS=
    escaped: every datagram line on the test's notify socket is one of the daemon's own
    commands (sd_notify(3): newline-separated KEY=VALUE assignments)."""
    d = lab.start(env={"WATCHDOG_USEC": "400000"})
    name = "inj\nWATCHDOG=trigger\nMAINPID=1\nx.mzML"
    lab.drop(name, 1)
    assert lab.wait_runs(1)[0][:2] == (name, "ok")
    shown = "inj\\nWATCHDOG=trigger\\nMAINPID=1\\nx.mzML"
    wait_for(lambda: any(shown in m for m in d.notes()), 10, "STATUS= naming the run, escaped")
    assert d.stop() == 0
    lines = [line for m in d.notes() for line in m.split("\n")]
    assert {line.split("=", 1)[0] for line in lines} <= {
        "READY",
        "STATUS",
        "WATCHDOG",
        "STOPPING",
    }, lines
    assert "WATCHDOG=trigger" not in lines
    assert not any(line.startswith("MAINPID=") for line in lines)
    # the daemon's own log lines stay one per record too
    assert not any(
        line.startswith(("WATCHDOG=trigger", "MAINPID=1")) for line in d.stderr().splitlines()
    )


def test_bad_config_at_start_exits_2(lab: Lab) -> None:
    """A config error at start exits 2 (RestartPreventExitStatus=2) with a one-line reason."""
    lab.config.write_text("watch: {settle_s: -1}\n")
    d = lab.start(ready=False)
    assert d.proc.wait(timeout=20) == 2
    assert "Traceback" not in d.stderr()
    assert "settle_s" in d.stderr()


def test_backtracking_regex_in_config_does_not_start_the_daemon(lab: Lab) -> None:
    """applies_to 're:(a+)+$' is refused at start: exit 2 naming the line, never READY=1, and the
    file whose name would make it spin is never matched."""
    lab.write_config(
        checks=[
            {
                "name": "calibration drift",
                "metric": "calibrant.*.median_ppm",
                "applies_to": "re:(a+)+$",
                "warning": {"outside": [-3, 3]},
            }
        ]
    )
    line = next(
        i for i, text in enumerate(lab.config.read_text().splitlines(), 1) if "(a+)+" in text
    )
    lab.drop("a" * 60 + "!.mzML", 1)
    d = lab.start(ready=False)
    assert d.proc.wait(timeout=20) == 2
    assert "Traceback" not in d.stderr()
    assert f"lab.yaml:{line}: checks[0].applies_to: regular expression '(a+)+$'" in d.stderr()
    assert "READY=1" not in d.notes()


def test_heartbeat_missed_once_then_resumed(lab: Lab, receiver: Receiver) -> None:
    """No run for expect_run_every: one 'heartbeat.missed' alert; a new run clears it."""
    lab.write_config(
        alerts={"channels": [{"name": "lab-chat", "url": receiver.url()}], "expect_run_every": "1s"}
    )
    d = lab.start()

    def kinds() -> list[str]:
        return [str(r.get("kind")) for r in lab.health() if r.get("type") == "event"]

    wait_for(lambda: "heartbeat.missed" in kinds(), 10, "heartbeat.missed in the health log")
    wait_for(lambda: receiver.bodies, 10, "the heartbeat alert")
    lab.drop("QC_back.mzML", 1)
    wait_for(lambda: "heartbeat.resumed" in kinds(), 10, "heartbeat.resumed")
    assert kinds().count("heartbeat.missed") == 1
    assert d.stop() == 0


def test_status_lists_waiting_files_and_one_line_per_open_problem(
    lab: Lab, receiver: Receiver
) -> None:
    """A cut-off export waiting to be called stalled shows under 'waiting files' with how long it
    has been unchanged; a bad run alerted on two channels is one open problem naming both."""
    lab.write_config(
        watch={"stall_s": 600},
        calibrants=[{"name": "siloxane-445", "mz": 445.120025, "search_ppm": 30}],
        checks=[
            {
                "name": "signal present",
                "metric": "signal.tic_median",
                "critical": {"above": 0},
            }
        ],
        alerts={
            "channels": [
                {"name": "lab-chat", "url": receiver.url()},
                {"name": "manager", "url": receiver.url("manager")},
            ]
        },
    )
    d = lab.start()
    data = lab.run_bytes(1)
    (lab.exports / "QC_cut.mzML").write_bytes(data[: len(data) // 2])
    lab.drop("QC_bad.mzML", 2)
    lab.wait_runs(1)

    def status() -> dict[str, Any]:
        out = run_cli("status", "--json", "-c", lab.config, cwd=lab.root)
        return json.loads(out.stdout)

    wait_for(lambda: status()["waiting_files"], 15, "the cut file among the waiting files")
    state = status()
    (waiting,) = state["waiting_files"]
    assert waiting["file"].endswith("QC_cut.mzML")
    assert waiting["why"].startswith("incomplete:")
    (problem,) = state["open_problems"]
    assert problem["check"] == "signal present"
    assert sorted(problem["channels"]) == ["lab-chat", "manager"]
    text = run_cli("status", "-c", lab.config, cwd=lab.root).stdout
    assert "QC_cut.mzML  incomplete:" in text
    assert text.count("signal present, ") == 1
    assert d.stop() == 0


def test_ctrl_c_exits_130_and_sigterm_0(lab: Lab) -> None:
    """SIGINT (Ctrl-C in a terminal) ends the daemon with 130 as every command does; SIGTERM,
    systemd's stop, with 0."""
    d = lab.start()
    d.signal(signal.SIGINT)
    assert d.proc.wait(timeout=15) == 130
    d2 = lab.start()
    assert d2.stop() == 0
