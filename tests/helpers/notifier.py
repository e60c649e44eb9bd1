"""A Notifier driven the way the daemon drives it, over a real SQLite file (``Harness``)."""

from __future__ import annotations

from typing import TYPE_CHECKING

from tests.helpers.records import make_verdict
from watcher.notify.notifier import Notifier
from watcher.store import db

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.clock import Clock
    from watcher.config import Config

FAST = {"backoff_base_s": 0.05, "backoff_max_s": 0.2, "poll_s": 0.02}


class Harness:
    """Records verdicts the way the daemon does: inside a write transaction, then health log."""

    def __init__(self, config: Config, state_dir: Path, clock: Clock) -> None:
        self.clock = clock
        self.config = config
        self.notifier = Notifier(config, state_dir, clock=clock, **FAST)  # type: ignore[arg-type]
        self.conn = db.connect(state_dir, daemon=True)
        self.run_id = 0

    def run(self, name: str, *findings: object, **kw: object) -> None:
        self.run_id += 1
        # Judged on every configured check that applies to the file, each on its own metric.
        judged = {(c.name, c.metric) for c in self.config.checks if c.applies_to_file(name)}
        judged |= {(f.check, f.subject) for f in findings}  # type: ignore[attr-defined]
        verdict = make_verdict(
            name,
            findings,  # type: ignore[arg-type]
            at_s=self.clock(),
            evaluated=frozenset(judged),
            **kw,  # type: ignore[arg-type]
        )
        with db.write(self.conn):
            self.notifier.record_verdict(self.conn, verdict, self.run_id, self.clock())
        self.notifier.write_health(verdict, self.run_id)

    def close(self) -> None:
        self.notifier.stop_delivery()
        self.conn.close()
