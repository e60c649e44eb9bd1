"""Alert lines as a person reads them, through the real daemon and a receiver on 127.0.0.1.

Runs come from the project's synthetic generator with known truth (``synth.CalibrantTruth``
offset in ppm; ``RunSpec.tic_scale`` scales the background's MS1 intensities, the calibrant's
stay, so a run's median TIC falls to a few thousand at 0.001). Each line must name its check
and subject, give the value with the limit, and say what to do; each channel's title gives the
worst state of that channel's own lines.
"""

from __future__ import annotations

import re
import time
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Any

import synth
from tests.helpers import badfiles as bf
from tests.helpers.daemon import SETTLE_S
from tests.helpers.wait import wait_for

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.daemon import Lab
    from tests.helpers.receiver import Receiver

SILOXANE_MZ = 445.120025  # polysiloxane background ion [C2H6SiO]6+H+ (common practice, lock mass)
INSTRUMENT = "Kestrel-2 Q-TOF"
DAY = datetime(2026, 11, 27, 18, 0, tzinfo=UTC)
# The generator's median TIC is about 6e5 at tic_scale 1 and about 5e3 at 0.001 (measured with
# ``ionwarden check``, 2026-12-03): a floor between them.
TIC_FLOOR = 10_000.0


def _items(message: str) -> list[str]:
    """A message's item lines: without its heading, its ack/silence hint and its id line."""
    body = message.splitlines()[1:]
    return [ln for ln in body if not ln.startswith(("seen it? ", "id: "))]


def _run(tmp: Path, n: int, *, offset_ppm: float, tic_scale: float = 1.0) -> bytes:
    spec = synth.RunSpec(
        duration_s=10,
        ms2_per_cycle=0,
        background_peaks=20,
        seed=n,
        tic_scale=tic_scale,
        calibrants=[
            synth.CalibrantTruth(name="siloxane-445", mz=SILOXANE_MZ, offset_ppm=offset_ppm)
        ],
        start_time=DAY + timedelta(minutes=25 * n),
    )
    path = tmp / f"gen{n}.mzML"
    synth.write_mzml(path, spec, indexed=False)
    return path.read_bytes()


def _drop(lab: Lab, name: str, data: bytes) -> None:
    tmp = lab.exports / f".{name}.part"
    tmp.write_bytes(data)
    tmp.rename(lab.exports / name)


def _configure(lab: Lab, receiver: Receiver, **watch: Any) -> None:
    drift = {"metric": "calibrant.*.median_ppm", "critical": {"outside": [-5, 5]}}
    lab.write_config(
        watch=watch,
        checks=[
            {"name": "calibration drift", **drift},
            {"name": "lock mass", **drift},  # a second check on the same metric and limit
            {
                "name": "signal floor",
                "metric": "signal.tic_median",
                "critical": {"below": TIC_FLOOR},
            },
        ],
        alerts={
            "channels": [
                {"name": "chat", "url": receiver.url("chat")},
                {
                    "name": "manager",
                    "url": receiver.url("manager"),
                    "checks": ["calibration drift"],
                },
            ]
        },
    )


_VALUE = r"([+-]\d+\.\d) ppm"


def test_lines_name_check_subject_value_and_limit_and_titles_follow_each_channel(
    lab: Lab, receiver: Receiver, tmp_path: Path
) -> None:
    """QC_01 drifts +6 ppm (truth): one line for the two drift checks, with value and limit.
    QC_02 is back at 0 ppm but its TIC is below the floor: the chat channel's message is
    CRITICAL (signal floor) with the drift's OK-again line; the manager, who takes only the drift
    check, gets only the OK-again line, titled OK with apprise type success although the run is
    critical."""
    _configure(lab, receiver)
    d = lab.start()
    _drop(lab, "QC_01.mzML", _run(tmp_path, 1, offset_ppm=6.0))
    lab.wait_runs(1)
    _drop(lab, "QC_02.mzML", _run(tmp_path, 2, offset_ppm=0.0, tic_scale=0.001))
    lab.wait_runs(2)
    wait_for(lambda: len(receiver.bodies) >= 4, 30, "two messages on each of two channels")
    assert d.stop() == 0
    assert [s for _, s, _ in lab.runs()] == ["critical", "critical"]
    msgs = receiver.by_path()
    chat, manager = msgs["/chat"], msgs["/manager"]
    assert [(b["title"], b["type"]) for b in chat] == [
        (f"{INSTRUMENT}: CRITICAL QC_01.mzML", "failure"),
        (f"{INSTRUMENT}: CRITICAL QC_02.mzML", "failure"),
    ]
    assert [(b["title"], b["type"]) for b in manager] == [
        (f"{INSTRUMENT}: CRITICAL QC_01.mzML", "failure"),
        (f"{INSTRUMENT}: OK QC_02.mzML", "success"),
    ]
    # QC_01 on chat: the two checks that fired on the same metric make ONE line.
    lines = _items(chat[0]["message"])
    assert len(lines) == 1, lines
    m = re.fullmatch(
        rf"NEW critical: calibration drift \+ lock mass, siloxane-445: {_VALUE}, "
        r"outside ±5 ppm — recalibrate before the next sample",
        lines[0],
    )
    assert m, lines
    assert abs(float(m.group(1)) - 6.0) <= 0.2  # synth truth +6 ppm, shown at 0.1 ppm
    # QC_02 on chat: the signal floor with its value and limit, then the clear with the value.
    lines = _items(chat[1]["message"])
    assert len(lines) == 2, lines
    m = re.fullmatch(
        r"NEW critical: signal floor, median TIC: (\d+(?:\.\d+)?)( k)?, below 10 k"
        r" — check the spray, the source and the LC flow",
        lines[0],
    )
    assert m, lines
    tic = float(m.group(1)) * (1000 if m.group(2) else 1)
    # the generator's background TIC times 0.001 plus the unscaled calibrant: a few thousand
    assert 1_000 < tic < TIC_FLOOR
    m = re.fullmatch(
        rf"OK AGAIN: calibration drift \+ lock mass, siloxane-445: {_VALUE}, within limits again",
        lines[1],
    )
    assert m, lines
    assert abs(float(m.group(1))) <= 0.2  # synth truth 0 ppm
    # The manager's message: only its own check's clear; no metric path anywhere.
    assert _items(manager[1]["message"]) == [
        lines[1].replace("calibration drift + lock mass", "calibration drift")
    ]
    assert "run status critical" in manager[1]["message"].splitlines()[0]
    assert not any("calibrant." in b["message"] for b in chat + manager)


def test_unreadable_and_stalled_runs_carry_their_action_hints(
    lab: Lab, receiver: Receiver, tmp_path: Path
) -> None:
    """A whole file that is not a run says re-export; a cut-off copy that stopped changing says
    check the transfer; both arrive within stall_s + settle_s + 2 s of being written."""
    stall_s = 2.0
    _configure(lab, receiver, stall_s=stall_s)
    d = lab.start()
    good = _run(tmp_path, 1, offset_ppm=0.0)
    (lab.exports / "QC_cut.mzML").write_bytes(good[: len(good) // 2])
    written = time.monotonic()
    wait_for(lambda: receiver.by_path().get("/chat"), stall_s + SETTLE_S + 10, "the stall alert")
    assert time.monotonic() - written <= stall_s + SETTLE_S + 2.0
    (line,) = _items(receiver.by_path()["/chat"][0]["message"])
    assert re.fullmatch(
        r"NEW critical: unreadable, QC_cut\.mzML: incomplete: .+, still so after \d+ s"
        r" — check the transfer and the share, then copy the run again",
        line,
    ), line
    # A good run clears it; then a whole file with a damaged zlib array (the PSI example file,
    # tests/data, damaged by tests/helpers/badfiles.py): the file is bad in itself, re-export it.
    _drop(lab, "QC_good.mzML", _run(tmp_path, 2, offset_ppm=0.0))
    _drop(lab, "QC_zlib.mzML", bf.bad_zlib(bf.EXAMPLE.read_bytes()))
    lab.wait_runs(3, timeout_s=30)
    wait_for(lambda: len(receiver.by_path().get("/chat", [])) >= 3, 15, "three chat messages")
    assert d.stop() == 0
    runs = {name: status for name, status, _ in lab.runs()}
    assert runs == {"QC_cut.mzML": "unreadable", "QC_good.mzML": "ok", "QC_zlib.mzML": "unreadable"}
    chat = receiver.by_path()["/chat"]
    assert [b["title"] for b in chat] == [
        f"{INSTRUMENT}: UNREADABLE QC_cut.mzML",
        f"{INSTRUMENT}: OK QC_good.mzML",
        f"{INSTRUMENT}: UNREADABLE QC_zlib.mzML",
    ]
    assert _items(chat[1]["message"]) == ["OK AGAIN: unreadable, runs are readable again"]
    (line,) = _items(chat[2]["message"])
    assert line.startswith("NEW critical: unreadable, QC_zlib.mzML: ")
    assert line.endswith(" — re-export the run from the acquisition software")
    # The manager takes only the drift check: no unreadable alert reaches it.
    assert "/manager" not in receiver.by_path()


def test_verbose_run_keeps_library_debug_lines_out(
    lab: Lab, receiver: Receiver, tmp_path: Path
) -> None:
    """``ionwarden -v run``: the daemon starts, judges and delivers as without -v, and its log
    has no line from the HTTP library below INFO (urllib3 logs request paths at DEBUG, and some
    apprise services carry their token in the path)."""
    _configure(lab, receiver)
    d = lab.start(options=("-v",))
    _drop(lab, "QC_01.mzML", _run(tmp_path, 1, offset_ppm=6.0))
    lab.wait_runs(1)
    wait_for(lambda: len(receiver.bodies) >= 2, 30, "the alert on both channels")
    assert d.stop() == 0
    log = d.stderr()
    assert "run.judged" in log
    assert "message.delivered" in log
    assert "urllib3" not in log
    assert "Starting new HTTP connection" not in log
