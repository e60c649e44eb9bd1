"""People in control of the alarms, end to end: ack, silence and maintenance windows.

The daemon runs as a subprocess (tests/helpers/daemon.py); the commands run as a person runs
them, in their own processes, while it runs; apprise posts every message to the receiver on
127.0.0.1 (tests/helpers/receiver.py). The runs come from the project's synthetic generator with
a known calibrant offset (ground truth in ``synth.CalibrantTruth``): 0 ppm is in spec, +4 ppm
is past the lab's +-3 ppm warning limit, +6 ppm past its +-5 ppm critical limit.
"""

from __future__ import annotations

import json
import sqlite3
import time
from datetime import datetime, timedelta
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

from tests.helpers.cli import Result, run_cli
from tests.helpers.nights import SILOXANE_MZ, run_bytes
from tests.helpers.wait import wait_for

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.daemon import Lab
    from tests.helpers.receiver import Receiver

INSTRUMENT = "Kestrel-2 Q-TOF"
DRIFT_CHECK = {
    "name": "calibration drift",
    "metric": "calibrant.*.median_ppm",
    "warning": {"outside": [-3, 3]},
    "critical": {"outside": [-5, 5]},
}


def configure(lab: Lab, url: str, **overrides: Any) -> None:
    alerts = {"channels": [{"name": "lab-chat", "url": url}], **overrides.pop("alerts", {})}
    lab.write_config(
        calibrants=[{"name": "siloxane-445", "mz": SILOXANE_MZ, "search_ppm": 30}],
        checks=[DRIFT_CHECK],
        alerts=alerts,
        **overrides,
    )


def drop(lab: Lab, name: str, data: bytes) -> None:
    """Write elsewhere, then rename in: the file appears whole (as a converter's export does)."""
    tmp = lab.exports / f".{name}.part"
    tmp.write_bytes(data)
    tmp.rename(lab.exports / name)


def cli(lab: Lab, *args: str) -> Result:
    """``python -m watcher ARGS -c CONFIG`` as the lab manager runs it."""
    return run_cli(*args, "-c", lab.config, cwd=lab.root, env={"PATH": "/usr/bin:/bin"})


def events(lab: Lab, kind: str) -> list[dict[str, Any]]:
    return [e for e in lab.health() if e.get("type") == "event" and e.get("kind") == kind]


def message_kinds(lab: Lab) -> list[str]:
    conn = sqlite3.connect(f"file:{lab.state / 'ionwarden.sqlite3'}?mode=ro", uri=True)
    try:
        return [r[0] for r in conn.execute("SELECT kind FROM messages ORDER BY message_id")]
    finally:
        conn.close()


def test_ack_stops_reminders_but_not_escalation_or_clear(
    lab: Lab, receiver: Receiver, tmp_path: Path
) -> None:
    """Open alert -> ack -> no reminder past remind_every -> worse run -> one escalation ->
    good run -> one cleared message. The ack is in status and in the health log."""
    configure(lab, receiver.url(), alerts={"remind_every": "4s"})
    d = lab.start()
    drop(lab, "QC_01.mzML", run_bytes(4.0, 1, tmp_path))
    wait_for(lambda: len(receiver.bodies) >= 1, 20, "the warning alert")
    assert "seen it? ionwarden ack -c " in receiver.bodies[0]["message"]
    done = cli(lab, "ack", "--by", "dana", "--note", "recalibrating after this run")
    assert done.returncode == 0, done.stderr
    assert "acknowledged: calibration drift, calibrant.siloxane-445.median_ppm (warning)" in (
        done.stdout
    )
    # The daemon notices within a second: the health-log event is its doing.
    wait_for(lambda: events(lab, "alert.acknowledged"), 5, "the ack in the health log")
    (ack_event,) = events(lab, "alert.acknowledged")
    assert ack_event["fields"]["by"] == "dana"
    status = cli(lab, "status", "--json")
    state = json.loads(status.stdout)
    assert state["open_problems"][0]["acknowledged"].startswith("acknowledged by dana at ")
    # Three reminder periods pass: without the ack two or three STILL messages would be sent.
    time.sleep(12)
    assert receiver.titles() == [f"{INSTRUMENT}: WARNING QC_01.mzML"]
    drop(lab, "QC_02.mzML", run_bytes(6.0, 2, tmp_path))
    wait_for(lambda: len(receiver.bodies) >= 2, 20, "the escalation")
    drop(lab, "QC_03.mzML", run_bytes(0.0, 3, tmp_path))
    wait_for(lambda: len(receiver.bodies) >= 3, 20, "the clear")
    assert d.stop() == 0
    assert receiver.titles() == [
        f"{INSTRUMENT}: WARNING QC_01.mzML",
        f"{INSTRUMENT}: CRITICAL QC_02.mzML",
        f"{INSTRUMENT}: OK QC_03.mzML",
    ]
    assert "WORSE critical" in receiver.bodies[1]["message"]
    assert "OK AGAIN: calibration drift" in receiver.bodies[2]["message"]


def test_silence_holds_every_message_and_summarizes_once(
    lab: Lab, receiver: Receiver, tmp_path: Path
) -> None:
    """A 30 s silence while three bad runs and one good run arrive: nothing reaches the
    receiver meanwhile, every run is judged and recorded (and shown silenced), and at its end
    one message tells what is still open and lists what opened and cleared meanwhile.

    The runs: +6 ppm (drift critical), a copy cut in half (unreadable), 0 ppm (both clear),
    +4 ppm (drift warning, open at the end)."""
    configure(lab, receiver.url(), watch={"stall_s": 1})
    d = lab.start()
    added = cli(lab, "silence", "add", "--for", "30s", "--reason", "source cleaning")
    assert added.returncode == 0, added.stderr
    started = time.monotonic()
    cut = run_bytes(0.0, 2, tmp_path)
    for n, data in (
        (1, run_bytes(6.0, 1, tmp_path)),
        (2, cut[: len(cut) // 2]),
        (3, run_bytes(0.0, 3, tmp_path)),
        (4, run_bytes(4.0, 4, tmp_path)),
    ):
        drop(lab, f"QC_0{n}.mzML", data)
        lab.wait_runs(n)
    assert time.monotonic() - started < 28, "the runs took longer than the silence"
    assert sorted(s for _, s, _ in lab.runs()) == ["critical", "ok", "unreadable", "warning"]
    listed = cli(lab, "silence", "list", "--json")
    assert [s["state"] for s in json.loads(listed.stdout)["silences"]] == ["in force"]
    status = json.loads(cli(lab, "status", "--json").stdout)
    marked = {r["file"]: r["silenced"] for r in status["last_runs"]}
    # the good run had no finding to hold back; the others' alerts were held
    assert marked == {
        "QC_01.mzML": True,
        "QC_02.mzML": True,
        "QC_03.mzML": False,
        "QC_04.mzML": True,
    }
    assert status["quiet_now"][0]["reason"] == "source cleaning"
    assert receiver.bodies == []
    wait_for(lambda: receiver.bodies, 40, "the end-of-silence summary")
    time.sleep(2)  # anything else would be sent in this time
    assert d.stop() == 0
    assert len(receiver.bodies) == 1
    body = receiver.bodies[0]
    assert body["title"] == f"{INSTRUMENT}: QUIET TIME OVER, STILL OPEN"
    lines = body["message"].splitlines()
    assert lines[0].startswith("silence 1 over (source cleaning) | ")
    assert lines[1] == "still open (1):"
    assert lines[2].startswith("STILL warning: ")
    assert "calibration drift, siloxane-445: +4.0 ppm" in lines[2]  # the synthetic truth
    assert lines[3] == "opened and cleared meanwhile: unreadable (critical)"
    # raise drift, raise unreadable, clear both, raise drift again
    assert lines[4] == "5 alert change(s) were held back while quiet"
    assert message_kinds(lab) == ["summary"]
    assert events(lab, "silence.added")
    assert events(lab, "silence.ended")


def test_maintenance_window_holds_alerts_and_the_no_run_alert(
    lab: Lab, receiver: Receiver, tmp_path: Path
) -> None:
    """A one-off maintenance window (local times, a zone with DST) open now: a bad run is
    judged but sends nothing, the no-run alert stays off; after it, one summary arrives."""
    tz = ZoneInfo("Europe/Berlin")
    now = datetime.now(tz)
    window = {
        "from": (now - timedelta(minutes=5)).strftime("%Y-%m-%d %H:%M:%S"),
        "until": (now + timedelta(seconds=20)).strftime("%Y-%m-%d %H:%M:%S"),
        "reason": "source cleaning",
    }
    configure(
        lab,
        receiver.url(),
        alerts={"expect_run_every": "2s"},
        instrument={"name": INSTRUMENT, "timezone": "Europe/Berlin"},
        maintenance=[window],
    )
    d = lab.start()
    drop(lab, "QC_01.mzML", run_bytes(6.0, 1, tmp_path))
    lab.wait_runs(1)
    time.sleep(5)  # more than twice expect_run_every with no run: the heartbeat would fire
    assert receiver.bodies == []
    assert not events(lab, "heartbeat.missed")
    wait_for(lambda: receiver.bodies, 40, "the end-of-window summary")
    assert d.stop() == 0
    first = receiver.bodies[0]
    assert first["title"] == f"{INSTRUMENT}: QUIET TIME OVER, STILL OPEN"
    assert "maintenance" in first["message"]
    assert "source cleaning" in first["message"]
    assert "STILL critical:" in first["message"]
    assert events(lab, "maintenance.ended")


def test_commands_refuse_what_does_not_exist(lab: Lab, receiver: Receiver) -> None:
    """No open alert, an unknown check, subject, instrument or silence: one line, exit 5, and
    nothing written; a bad duration is a usage error (exit 2)."""
    configure(lab, receiver.url())
    d = lab.start()
    no_alert = cli(lab, "ack")
    assert no_alert.returncode == 5
    assert no_alert.stderr.strip() == (
        f"ionwarden ack: no open alert of '{INSTRUMENT}' to acknowledge"
    )
    typo = cli(lab, "ack", "--check", "calibration drfit")
    assert typo.returncode == 5
    assert "no check named 'calibration drfit'" in typo.stderr
    assert "did you mean 'calibration drift'?" in typo.stderr
    assert cli(lab, "silence", "end", "42").returncode == 5
    other = cli(lab, "note", "column replaced", "--instrument", "Osprey-1")
    assert other.returncode == 5
    assert "no instrument named 'Osprey-1'" in other.stderr
    unknown = cli(lab, "silence", "add", "--for", "1h", "--subject", "caffeine", "--reason", "x")
    assert unknown.returncode == 5
    assert "no subject named 'caffeine'" in unknown.stderr
    zero = cli(lab, "silence", "add", "--for", "0s", "--reason", "x")
    assert zero.returncode == 2
    assert "--for" in zero.stderr
    assert d.stop() == 0
    assert json.loads(cli(lab, "silence", "list", "--json", "--all").stdout)["silences"] == []
