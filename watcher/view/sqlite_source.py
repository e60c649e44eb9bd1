"""``FloorSource`` over the daemon's own SQLite store: one instrument per state folder.

Opens the store read-only (``mode=ro``, ``watcher.store.db.connect``) once and keeps the
connection: every open runs ``PRAGMA quick_check``, which reads the whole file, so reopening per
scrape would make a scrape's cost grow with the history. WAL lets this reader run beside the
daemon's writes without blocking either (docs/reliability.md item 5). Each question is a few
indexed SELECTs in one read transaction; one lock per store serialises the threads sharing the
connection. A store that is missing, damaged or being upgraded is reported as unavailable with a
short note (no paths), and opened again on the next call.
"""

from __future__ import annotations

import re
import sqlite3
import threading
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

from watcher.errors import IonwardenError, StoreCorruptError, StoreError, StoreTooNewError
from watcher.records import Status, shown
from watcher.store import db, history, outbox
from watcher.view.source import InstrumentNow, Problem, RunView

if TYPE_CHECKING:
    from collections.abc import Iterator, Sequence
    from contextlib import AbstractContextManager
    from pathlib import Path

    from watcher.config import Check, Config
    from watcher.records import HistoryPoint
    from watcher.store.history import RunRow

# An error text may quote the run's path (``ReadError`` names the file): the views show file
# names only, so any absolute path in it is cut to its last part.
_ABSOLUTE_PATH = re.compile(r"(?<![\w.])/(?:[^\s/'\"]+/)+(?=[^\s/'\"]*)")


def strip_paths(text: str | None) -> str | None:
    """``text`` with every absolute path reduced to its last part (the file name)."""
    return None if text is None else _ABSOLUTE_PATH.sub("", text)


def run_view(row: RunRow) -> RunView:
    return RunView(
        run_id=row.run_id,
        file_name=shown(row.file_name),
        acquired_at=row.acquired_at,
        judged_at=row.judged_at,
        status=str(row.status),
        error=strip_paths(row.error),
        metrics=row.metrics,
        findings=row.findings,
    )


class SqliteFloorSource:
    """One instrument: the config's ``instrument.name`` and checks, its ``state_dir`` store."""

    def __init__(self, config: Config, state_dir: Path) -> None:
        self.name = config.instrument.name
        self._checks = config.checks
        self._timezone = config.instrument.timezone
        self._state_dir = state_dir
        self._conn: sqlite3.Connection | None = None
        self._lock = threading.Lock()
        self._tally = _StatusTally()

    def names(self) -> Sequence[str]:
        return (self.name,)

    def checks(self, instrument: str) -> tuple[Check, ...]:
        self._known(instrument)
        return self._checks

    def timezone(self, instrument: str) -> str:
        self._known(instrument)
        return self._timezone

    def close(self) -> None:
        with self._lock:
            if self._conn is not None:
                self._conn.close()
                self._conn = None

    def _known(self, instrument: str) -> None:
        if instrument != self.name:
            raise KeyError(instrument)

    def _reading(self) -> AbstractContextManager[sqlite3.Connection]:
        """The connection in one read transaction, under the lock; opened when needed."""
        from contextlib import contextmanager

        @contextmanager
        def reading() -> Iterator[sqlite3.Connection]:
            with self._lock:
                if self._conn is None:
                    self._conn = db.connect(self._state_dir, readonly=True)
                    self._tally = _StatusTally()
                try:
                    with db.read(self._conn):
                        yield self._conn
                except sqlite3.DatabaseError:
                    # Opened again next time: the file may have been replaced (a restore).
                    self._conn.close()
                    self._conn = None
                    raise

        return reading()

    def instrument(self, instrument: str) -> InstrumentNow:
        self._known(instrument)
        return self.instruments()[0]

    def instruments(self) -> list[InstrumentNow]:
        try:
            with self._reading() as conn:
                return [self._now(conn)]
        except StoreTooNewError:
            note = "its store was written by a newer ionwarden"
        except StoreCorruptError:
            note = "its store is damaged (see ionwarden status on its machine)"
        except StoreError as exc:
            note = "no state yet" if "no state database" in str(exc) else "store not readable now"
        except sqlite3.Error:
            note = "store not readable now"
        return [InstrumentNow(name=self.name, available=False, note=note)]

    def _now(self, conn: sqlite3.Connection) -> InstrumentNow:
        last = history.recent_runs(conn, limit=1)
        measured = last
        if last and last[0].status is Status.UNREADABLE:
            # Walks the judged_at index back to the first readable run: a few rows, not all.
            row = conn.execute(
                "SELECT run_id FROM runs WHERE status != 'unreadable'"
                " ORDER BY judged_at DESC, run_id DESC LIMIT 1"
            ).fetchone()
            found = None if row is None else history.get_run(conn, int(row[0]))
            measured = [] if found is None else [found]
        by_status = self._tally.update(conn)
        deliveries = {str(s): 0 for s in outbox.DeliveryStatus}
        for status, n in conn.execute("SELECT status, count(*) FROM deliveries GROUP BY status"):
            deliveries[status] = int(n)
        queued = conn.execute(
            "SELECT count(*) FROM jobs WHERE state IN ('queued', 'measuring')"
        ).fetchone()[0]
        return InstrumentNow(
            name=self.name,
            available=True,
            last_run=run_view(last[0]) if last else None,
            last_measured=run_view(measured[0]) if measured else None,
            problems=_problems(conn),
            runs_by_status=by_status,
            messages_delivered=deliveries[outbox.DeliveryStatus.DELIVERED],
            messages_failed=deliveries[outbox.DeliveryStatus.ABANDONED],
            messages_pending=deliveries[outbox.DeliveryStatus.PENDING],
            queue_length=int(queued),
        )

    def runs(self, instrument: str, start: datetime, end: datetime, *, limit: int) -> list[RunView]:
        """Runs acquired in ``[start, end)``, oldest first; the newest ``limit`` when more."""
        self._known(instrument)
        with self._reading() as conn:
            return [run_view(r) for r in history.newest_between(conn, start, end, limit=limit)]

    def before(
        self,
        instrument: str,
        metric: str,
        *,
        before: datetime,
        limit: int,
        applies_to: Sequence[str] = (),
    ) -> list[HistoryPoint]:
        self._known(instrument)
        with self._reading() as conn:
            return history.StoreHistory(conn, applies_to=applies_to).series(
                metric, before=before, limit=limit
            )

    def change_mark(self) -> str:
        """The newest judged run's id and time, and the open alerts' count: cheap (indexes)."""
        try:
            with self._reading() as conn:
                row = conn.execute(
                    "SELECT run_id, judged_at FROM runs ORDER BY judged_at DESC, run_id DESC"
                    " LIMIT 1"
                ).fetchone()
                alerts = conn.execute("SELECT count(*) FROM alert_state").fetchone()[0]
        except (IonwardenError, sqlite3.Error):
            return "-"
        return "-" if row is None else f"{row[0]}@{row[1]}#{alerts}"


_STATUSES = tuple(str(s) for s in Status)


class _StatusTally:
    """Runs per status, kept up to date from the rows added or re-judged since the last call.

    A ``GROUP BY status`` reads every run row (no index holds the status): 26 ms at 10,000 runs
    here, linear beyond. The runs table is only ever appended to or updated in place (a re-judged
    file identity keeps its ``run_id`` and gets a newer ``judged_at``; the history is never
    pruned), so the rows with a higher ``run_id`` or a newer ``judged_at`` than seen before are
    all that can change the counts: both are indexed (rowid, ``runs_by_judged``). One byte per
    run remembers each run's status, to move a re-judged run from its old count to its new one.
    """

    def __init__(self) -> None:
        self._status_of = bytearray()  # run_id -> 1 + index in _STATUSES; 0: not seen
        self._counts = [0] * len(_STATUSES)
        self._max_id = 0
        self._judged = ""

    def update(self, conn: sqlite3.Connection) -> dict[str, int]:
        rows = conn.execute(
            # Two index searches; a row found by both is applied twice, which changes nothing.
            "SELECT run_id, status, judged_at FROM runs WHERE run_id > ?"
            " UNION ALL SELECT run_id, status, judged_at FROM runs WHERE judged_at >= ?",
            (self._max_id, self._judged),
        ).fetchall()
        for run_id, status, judged_at in rows:
            code = _STATUSES.index(status) + 1 if status in _STATUSES else 0
            if run_id >= len(self._status_of):
                self._status_of.extend(bytes(run_id + 1 - len(self._status_of) + 1024))
            old = self._status_of[run_id]
            if old:
                self._counts[old - 1] -= 1
            if code:
                self._counts[code - 1] += 1
            self._status_of[run_id] = code
            self._max_id = max(self._max_id, run_id)
            self._judged = max(self._judged, judged_at)
        return dict(zip(_STATUSES, self._counts, strict=True))


def _problems(conn: sqlite3.Connection) -> tuple[Problem, ...]:
    """One per open (check, subject), the earliest raise and the highest severity among the
    channels holding it (as ``ionwarden status`` merges them)."""
    merged: dict[tuple[str, str], dict[str, Any]] = {}
    rank = {"notice": 1, "warning": 2, "critical": 3}
    for a in outbox.load_alerts(conn):
        key = (a.check, a.subject)
        severity = str(a.state.severity)
        entry = merged.setdefault(
            key,
            {
                "check": a.check,
                "subject": a.subject,
                "severity": severity,
                "since_s": a.state.raised_at_s,
                "run_file": None if a.run_file is None else shown(a.run_file),
                "value": a.state.finding.value,
            },
        )
        entry["since_s"] = min(entry["since_s"], a.state.raised_at_s)
        if rank.get(severity, 0) > rank.get(entry["severity"], 0):
            entry["severity"] = severity
    return tuple(
        Problem(
            check=e["check"],
            subject=e["subject"],
            severity=e["severity"],
            since=datetime.fromtimestamp(e["since_s"], UTC),
            run_file=e["run_file"],
            value=e["value"],
        )
        for e in merged.values()
    )
