"""The health log: one JSON-lines file per day (instrument time zone), written only by the daemon.

A run's line goes into the file of the day the run was ACQUIRED, in the instrument's time zone
(``watcher.records.run_time``: the file's start time, else its mtime), the same day the digest
files it under, so a run made at 23:30 and judged after midnight is in that evening's file and
that evening's digest; the line also records when it was judged (``judged_at``). Event lines go
by the time they happened.

Each record is one whole line appended with a single ``os.write`` on an ``O_APPEND`` descriptor
and fsynced, so a crash leaves whole lines only. Run records are idempotent by ``run_key``, a hash
of the run's file identity and content (path, size, mtime_ns, sha256): the day's file is read
once for the keys it holds, then a small in-memory set answers. Not by ``run_id``: run ids start
again at 1 in a re-created store, and a new run must not be taken for an old one's line. A run
record is built by ``run_record`` from a stored run (``history.RunRow``) or from a fresh
``Verdict`` with the same result, so a line re-offered after a restart equals the one it stands for.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import threading
import time
from datetime import date, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

from watcher.records import shown

if TYPE_CHECKING:
    from collections.abc import Callable

    from watcher.records import Finding, Status, Verdict
    from watcher.store.history import RunRow

_FILE_RE = re.compile(r"^health-(\d{4}-\d{2}-\d{2})\.jsonl$")


def file_name(day: date) -> str:
    return f"health-{day.isoformat()}.jsonl"


def run_key(path: str, size: int, mtime_ns: int, sha256: str | None) -> str:
    """What identifies a run's health-log line across stores: the file identity and content.

    The same file judged again (a restart, a re-created store) gives the same key, so its line
    is not repeated; any other file gives another key, whatever run id a new store hands out.
    """
    identity = f"{path}\0{size}\0{mtime_ns}\0{sha256 or ''}"
    return hashlib.sha256(identity.encode("utf-8", "surrogateescape")).hexdigest()[:32]


def run_record(
    *,
    run_id: int,
    key: str,
    path: str,
    judged_at: datetime,
    acquired_at: datetime,
    status: Status,
    error: str | None,
    metrics: dict[str, float | bool | None],
    findings: tuple[Finding, ...],
) -> dict[str, Any]:
    """The health-log record of one judged run.

    Non-finite metric values are written as null, as the store keeps them ("not measured";
    ``Infinity`` is not JSON either), so a record rebuilt from the store is the same record.
    """
    return {
        "type": "run",
        "run_id": run_id,
        "run_key": key,
        "file": shown(Path(path).name),  # undecodable bytes as \\xNN: the line stays ASCII JSON
        "path": shown(path),
        "time": judged_at.isoformat(),  # when it was judged (kept from the first format)
        "judged_at": judged_at.isoformat(),
        # the day of the file: the acquisition time, else the file's mtime (records.run_time)
        "acquired_at": acquired_at.isoformat(),
        "status": str(status),
        "error": error,
        "metrics": {k: _finite_or_none(v) for k, v in metrics.items()},
        "findings": [f.to_dict() for f in findings],
    }


def stored_run_record(row: RunRow) -> dict[str, Any]:
    """The record of a run as the store holds it (the start-up replay after a kill)."""
    return run_record(
        run_id=row.run_id,
        key=run_key(row.path, row.size, row.mtime_ns, row.sha256),
        path=row.path,
        judged_at=row.judged_at,
        acquired_at=row.acquired_at,
        status=row.status,
        error=row.error,
        metrics=row.metrics,
        findings=row.findings,
    )


def _finite_or_none(value: float | bool | None) -> float | bool | None:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


class HealthLog:
    """Appends run and event records to ``<dir>/health-YYYY-MM-DD.jsonl``.

    Args:
        directory: where the daily files live (created when needed).
        timezone: IANA name; a record's day is its time in this zone.
        keep_days: ``prune()`` removes files whose day is older than this many days.
        clock: epoch seconds, for event times and pruning.
    """

    def __init__(
        self,
        directory: Path,
        *,
        timezone: str = "UTC",
        keep_days: int = 90,
        clock: Callable[[], float] = time.time,
    ) -> None:
        self.directory = directory
        self._tz = ZoneInfo(timezone)
        self.keep_days = keep_days
        self._clock = clock
        self._lock = threading.Lock()  # the delivery worker logs events too
        # Per day: the run keys written, and (run_id, path) of lines written before run_key was.
        self._seen: dict[date, tuple[set[str], set[tuple[int, str]]]] = {}

    def path_for(self, day: date) -> Path:
        return self.directory / file_name(day)

    def _day(self, at: datetime) -> date:
        return at.astimezone(self._tz).date()

    def write_run(self, verdict: Verdict, run_id: int) -> bool:
        """Append the run's record unless its ``run_key`` is already in that day's file.

        Returns:
            True when a line was written.
        """
        judged = verdict.judged_at or datetime.fromtimestamp(self._clock()).astimezone()
        run_file = verdict.run_file
        record = run_record(
            run_id=run_id,
            key=run_key(str(run_file.path), run_file.size, run_file.mtime_ns, run_file.sha256),
            path=str(verdict.run_file.path),
            judged_at=judged,
            acquired_at=verdict.acquired_at,
            status=verdict.status,
            error=verdict.error,
            metrics=verdict.metrics.flat() if verdict.metrics is not None else {},
            findings=verdict.findings,
        )
        return self._write_run_record(self._day(verdict.acquired_at), self._day(judged), record)

    def write_stored_run(self, row: RunRow) -> bool:
        """``write_run`` for a run read back from the store; True when a line was written."""
        record = stored_run_record(row)
        return self._write_run_record(self._day(row.acquired_at), self._day(row.judged_at), record)

    def _write_run_record(self, day: date, judged_day: date, record: dict[str, Any]) -> bool:
        """Append to ``day``'s file unless the run's line is there, or in its judging day's file
        (where versions before acquisition-day files put it: a replay after an upgrade must
        not write the line a second time)."""
        with self._lock:
            for where in {day, judged_day}:
                keys, legacy = self._keys_of(where)
                if record["run_key"] in keys or (record["run_id"], record["path"]) in legacy:
                    return False
            self._append(day, record)
            self._keys_of(day)[0].add(record["run_key"])
        return True

    def write_event(self, kind: str, **fields: object) -> None:
        """Append one daemon event (start, stop, reload, alert sent/failed, heartbeat missed...)."""
        now = datetime.fromtimestamp(self._clock()).astimezone()
        record = {
            "type": "event",
            "kind": kind,
            "time": now.isoformat(),
            "fields": {k: _plain(v) for k, v in fields.items()},
        }
        with self._lock:
            self._append(self._day(now), record)

    def prune(self) -> list[Path]:
        """Remove daily files older than ``keep_days``; returns what was removed.

        A file is old when its day AND its last write are: a run acquired long ago (old data
        exported again, an instrument clock set wrong) goes into its acquisition day's file,
        which must not be removed within the hour of that line being written.
        """
        now_s = self._clock()
        today = datetime.fromtimestamp(now_s, self._tz).date()
        oldest_kept = today - timedelta(days=self.keep_days)
        written_since_s = now_s - self.keep_days * 86400.0
        removed: list[Path] = []
        if not self.directory.is_dir():
            return removed
        for path in sorted(self.directory.iterdir()):
            match = _FILE_RE.match(path.name)
            if match and date.fromisoformat(match.group(1)) < oldest_kept:
                try:
                    if path.stat().st_mtime >= written_since_s:
                        continue  # an old day, but written lately: kept as long as a new day
                except FileNotFoundError:
                    continue
                path.unlink(missing_ok=True)
                removed.append(path)
        with self._lock:
            for day in [d for d in self._seen if d < oldest_kept]:
                del self._seen[day]
        return removed

    def _keys_of(self, day: date) -> tuple[set[str], set[tuple[int, str]]]:
        if day not in self._seen:
            keys: set[str] = set()
            legacy: set[tuple[int, str]] = set()
            path = self.path_for(day)
            if path.exists():
                for line in path.read_text(encoding="utf-8").splitlines():
                    try:
                        record = json.loads(line)
                    except json.JSONDecodeError:
                        continue  # a line cut by a full disk; whole-line appends make it rare
                    if record.get("type") != "run":
                        continue
                    if isinstance(record.get("run_key"), str):
                        keys.add(record["run_key"])
                    elif isinstance(record.get("run_id"), int):
                        # Written before run_key: the run id alone repeats in a new store, the
                        # path with it does not for the runs a restart re-offers.
                        legacy.add((record["run_id"], str(record.get("path"))))
            self._seen[day] = (keys, legacy)
        return self._seen[day]

    def _append(self, day: date, record: dict[str, Any]) -> None:
        self.directory.mkdir(parents=True, exist_ok=True)
        line = (json.dumps(record, ensure_ascii=True, sort_keys=True) + "\n").encode("ascii")
        fd = os.open(self.path_for(day), os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o640)
        try:
            os.write(fd, line)  # one write of a whole line: readers never see half a record
            os.fsync(fd)
        finally:
            os.close(fd)


def _plain(value: object) -> object:
    if value is None or isinstance(value, str | int | float | bool):
        return value
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    return str(value)
