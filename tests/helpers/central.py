"""Local stores fed the way the daemon's pipeline commits runs (history, the notify stage's
alert step and the central queue in one transaction), for the central-store tests."""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING, Any

from tests.helpers.configs import lab_config
from tests.helpers.records import make_metrics, make_verdict
from watcher.central import queue
from watcher.notify.notifier import Notifier
from watcher.store import db, history

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.clock import Clock

DRIFT = ("calibration drift", "calibrant.siloxane-445.median_ppm")


class LocalStore:
    """One instrument's local store; ``run()`` commits a run as the pipeline does."""

    def __init__(self, state_dir: Path, clock: Clock, instrument: str = "Kestrel-2 Q-TOF") -> None:
        self.state_dir = state_dir
        self.clock = clock
        self.instrument = instrument
        config = lab_config("json://127.0.0.1:9/unused")
        self.config = dataclasses.replace(
            config,
            instrument=dataclasses.replace(config.instrument, name=instrument, timezone="UTC"),
        )
        self.notifier = Notifier(self.config, state_dir, clock=clock)
        self.conn = db.connect(state_dir, daemon=True)

    def run(self, name: str, *findings: Any, ppm: float = 0.5, step_s: float = 60.0) -> int:
        verdict = make_verdict(name, findings, at_s=self.clock(), evaluated=frozenset({DRIFT}))
        verdict = dataclasses.replace(verdict, metrics=make_metrics(file=name, siloxane_ppm=ppm))
        with db.write(self.conn):
            run_id = history.record_verdict(self.conn, verdict)
            self.notifier.record_verdict(self.conn, verdict, run_id, self.clock())
            queue.queue_judged(self.conn, self.instrument, run_id, self.clock())
        self.clock.advance(step_s)
        return run_id

    def queued(self) -> int:
        return queue.length(self.conn)

    def close(self) -> None:
        self.conn.close()
