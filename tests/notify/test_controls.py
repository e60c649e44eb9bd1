"""Silences in the notifier, over a real SQLite file and a real receiver on 127.0.0.1: a silence
of one check holds that check's changes only, reminders wait, and the end tells what happened.
The clock is controlled (tests/helpers/clock.py); the runs are the daemon's records."""

from __future__ import annotations

from typing import TYPE_CHECKING

import pytest

from tests.helpers.configs import lab_config
from tests.helpers.notifier import Harness
from tests.helpers.records import make_finding
from tests.helpers.wait import wait_for
from watcher.records import Severity
from watcher.store import controls, db

if TYPE_CHECKING:
    from collections.abc import Iterator
    from pathlib import Path

    from tests.helpers.clock import Clock
    from tests.helpers.receiver import Receiver

HOUR_S = 3600.0


@pytest.fixture
def harness(tmp_path: Path, receiver: Receiver, clock: Clock) -> Iterator[Harness]:
    h = Harness(lab_config(receiver.url(), remind_every_s=HOUR_S), tmp_path / "state", clock)
    h.notifier.start_delivery()
    yield h
    h.close()


def _missing() -> object:
    return make_finding(
        Severity.CRITICAL,
        check="caffeine present",
        metric="expected_ion.caffeine.found",
        value=False,  # type: ignore[arg-type]
        limit="is false",
    )


def test_a_silence_of_one_check_holds_only_that_check(
    harness: Harness, receiver: Receiver, clock: Clock
) -> None:
    h = harness
    drift = make_finding(Severity.WARNING, value=3.4)
    h.run("QC_001.mzML", drift)
    receiver.wait_for(1)
    with db.write(h.conn):
        controls.add_silence(
            h.conn,
            instrument="Kestrel-2 Q-TOF",
            check="calibration drift",
            subject=None,
            reason="recalibrating",
            by="dana",
            start_s=clock(),
            end_s=clock() + 2 * HOUR_S,
        )
    clock.advance(600)
    h.run("QC_002.mzML", _missing())  # drift clears (held), caffeine raised (sent)
    receiver.wait_for(2)
    assert "NEW critical: caffeine present, caffeine: not found" in receiver.bodies[1]["message"]
    assert "calibration drift" not in receiver.bodies[1]["message"]
    clock.advance(600)
    h.run("QC_003.mzML", drift, _missing())  # drift raised again (held)
    clock.advance(1.5 * HOUR_S)  # past remind_every: the caffeine alert is reminded, drift not
    h.notifier.tick(h.conn, clock())
    receiver.wait_for(3)
    assert "STILL critical: caffeine present, caffeine: not found" in receiver.bodies[2]["message"]
    assert "calibration drift" not in receiver.bodies[2]["message"]
    h.run("QC_004.mzML")  # both clear: caffeine's is sent, drift's held
    receiver.wait_for(4)
    assert "OK AGAIN: caffeine present" in receiver.bodies[3]["message"]
    clock.advance(HOUR_S)  # the silence is over
    h.notifier.tick(h.conn, clock())
    (summary,) = receiver.wait_for(5)[4:]
    assert summary["title"] == "Kestrel-2 Q-TOF: QUIET TIME OVER, ALL CLEAR"
    lines = summary["message"].splitlines()
    assert lines[0].startswith("silence 1 over (recalibrating) | ")
    assert lines[1] == ("opened and cleared meanwhile: calibration drift, siloxane-445 (warning)")
    assert lines[2] == "3 alert change(s) were held back while quiet"
    h.notifier.tick(h.conn, clock.advance(5))  # told once: nothing new is queued
    wait_for(lambda: h.notifier.pending_count() == 0, 10, "the outbox empty")
    assert len(receiver.bodies) == 5
