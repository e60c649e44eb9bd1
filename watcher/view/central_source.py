"""``FloorSource`` over the central PostgreSQL store: every instrument that published to it.

``ionwarden serve -c CONFIG --all`` reads the config's ``central.url`` through one read-only
connection (``watcher.central.reader.open_reader``: read-only transactions, a statement time
limit), kept open and shared by the page's threads under a lock. Each instrument's time zone
comes from the profile its daemon publishes (``watcher.central.profile``); its checks stay in
its own config on its own machine, so only the serving config's instrument has its limit lines
drawn, the others are drawn against their baseline alone (as ``digest --instrument``).

What the central store does not hold is reported as nothing: the local job queue (its length is
0 here; the daemon's own ``/metrics`` has it). The last run is the newest acquired (the
``runs_by_time`` index, as ``status --all`` shows it), where the local source takes the newest
judged: the two differ only while a backlog of older files is being judged.

When the server goes away while serving, every instrument shows as unavailable (``note``, no
URL) and the connection is opened again on the next question; an unreachable server at start
is the caller's one-line error (``StoreError`` from the constructor).
"""

from __future__ import annotations

import threading
import time
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

from watcher.central import reader
from watcher.central.url import masked, scrub
from watcher.config import matches_applies_to
from watcher.errors import StoreError
from watcher.records import Finding, HistoryPoint, Severity, Status, shown
from watcher.view.source import InstrumentNow, Problem, RunView
from watcher.view.sqlite_source import strip_paths

if TYPE_CHECKING:
    from collections.abc import Callable, Iterator, Sequence
    from contextlib import AbstractContextManager

    import psycopg

    from watcher.config import Check, Config

UNREACHABLE = "central store not readable now"
RETRY_S = 2.0  # after a failed connection, the next attempt waits this long
_EPOCH = datetime.fromtimestamp(0, UTC)  # an open alert published without its raise time
_PAGE = 500  # metric rows read per round trip while the kind filter drops some

_RUN_COLUMNS = "local_run_id, file_name, acquired_at, judged_at, status, error, metrics, findings"

# One statement for every tile: the newest acquired run per instrument and the newest one that
# was measured (not unreadable), both walks of the (instrument, acquired_at) index.
_NOW = f"""
    SELECT i.instrument, l.*, m.*
    FROM instruments AS i
    LEFT JOIN LATERAL (
        SELECT {_RUN_COLUMNS} FROM runs WHERE runs.instrument = i.instrument
        ORDER BY acquired_at DESC, judged_at DESC LIMIT 1
    ) AS l ON true
    LEFT JOIN LATERAL (
        SELECT {_RUN_COLUMNS} FROM runs
        WHERE runs.instrument = i.instrument AND status <> 'unreadable'
        ORDER BY acquired_at DESC, judged_at DESC LIMIT 1
    ) AS m ON true
    ORDER BY i.instrument
"""  # noqa: S608 - constant column list

_COLUMNS = len(_RUN_COLUMNS.split(","))

# The Levey-Jennings baseline: newest first, one page at a time, through run_metrics' primary
# key (instrument, metric, acquired_at, file_key); the value from the run's own metrics.
_BEFORE = (
    "SELECT r.file_name, m.acquired_at, r.metrics -> m.metric, r.status, m.file_key"
    " FROM run_metrics AS m JOIN runs AS r"
    " ON r.instrument = m.instrument AND r.file_key = m.file_key"
    " WHERE m.instrument = %s AND m.metric = %s AND "
)
_ORDER = " ORDER BY m.acquired_at DESC, m.file_key DESC LIMIT %s"
_BEFORE_FIRST = _BEFORE + "m.acquired_at < %s" + _ORDER
_BEFORE_NEXT = _BEFORE + "(m.acquired_at, m.file_key) < (%s, %s)" + _ORDER


def _finding(d: dict[str, Any]) -> Finding:
    """A published finding (``watcher.central.queue.run_payload``) as the record."""
    return Finding(
        check=str(d.get("check", "")),
        severity=Severity(d.get("severity", "warning")),
        metric=str(d.get("metric", "")),
        subject=str(d.get("subject", d.get("metric", ""))),
        message=str(d.get("message", "")),
        value=d.get("value"),
        limit=str(d.get("limit", "")),
        rule=str(d.get("rule", "limit")),
        baseline=d.get("baseline"),
        forecast_h=d.get("forecast_h"),
    )


def run_view(row: Sequence[Any]) -> RunView:
    """A row of ``_RUN_COLUMNS`` as the views show it (file names only, no paths)."""
    return RunView(
        run_id=int(row[0]),
        file_name=shown(row[1]),
        acquired_at=row[2],
        judged_at=row[3],
        status=str(Status(row[4])),
        error=strip_paths(row[5]),
        metrics=dict(row[6] or {}),
        findings=tuple(_finding(d) for d in (row[7] or ())),
    )


def _zone(profile: dict[str, Any] | None) -> str:
    """The profile's IANA zone, UTC when it names none this machine knows."""
    text = (profile or {}).get("timezone")
    if isinstance(text, str):
        try:
            ZoneInfo(text)
        except (ValueError, KeyError):
            return "UTC"
        return text
    return "UTC"


class CentralFloorSource:
    """Every instrument of the central store at ``url``; ``own`` are configs at hand (the
    ``-c`` files): their instruments get their checks and time zone from them.

    Raises:
        StoreError: at construction, the store cannot be read (its message names the masked
            URL, never the password).
    """

    def __init__(
        self,
        url: str,
        *,
        own: Sequence[Config] = (),
        connect_timeout_s: float = 5.0,
        connect: Callable[[str, float], psycopg.Connection[Any]] = reader.open_reader,
    ) -> None:
        self._url = url
        self._timeout_s = connect_timeout_s
        self._connect = connect
        self._own = {c.instrument.name: c for c in own}
        self._lock = threading.Lock()
        self._conn: psycopg.Connection[Any] | None = connect(url, connect_timeout_s)
        self._retry_at = 0.0
        self._zones: dict[str, str] = {}
        import psycopg

        try:
            with self._reading() as conn:
                self._refresh_names(conn)
        except psycopg.Error as exc:  # e.g. no SELECT right on the tables
            first = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
            raise StoreError(f"central store {masked(url)}: {scrub(first, url)}") from exc

    def close(self) -> None:
        with self._lock:
            if self._conn is not None:
                self._conn.close()
                self._conn = None

    def _reading(self) -> AbstractContextManager[psycopg.Connection[Any]]:
        """The connection under the lock, opened again when the last one failed."""
        from contextlib import contextmanager

        import psycopg

        @contextmanager
        def reading() -> Iterator[psycopg.Connection[Any]]:
            with self._lock:
                if self._conn is None:
                    # An unreachable host costs connect_timeout_s per attempt: at most one
                    # attempt per RETRY_S, not one per question of every page.
                    if time.monotonic() < self._retry_at:
                        raise StoreError(UNREACHABLE)
                    self._retry_at = time.monotonic() + RETRY_S
                    self._conn = self._connect(self._url, self._timeout_s)
                try:
                    yield self._conn
                except psycopg.Error:
                    # A server restart or a dropped link: a new connection next time.
                    self._conn.close()
                    self._conn = None
                    raise

        return reading()

    def _refresh_names(self, conn: psycopg.Connection[Any]) -> None:
        zones = {
            str(name): _zone(profile)
            for name, profile in conn.execute(
                "SELECT instrument, profile FROM instruments ORDER BY 1"
            )
        }
        for name in zones.keys() & self._own.keys():
            zones[name] = self._own[name].instrument.timezone
        self._zones = zones

    def _try(self, ask: Callable[[psycopg.Connection[Any]], Any], default: Any) -> Any:
        import psycopg

        try:
            with self._reading() as conn:
                return ask(conn)
        except (psycopg.Error, StoreError):
            return default

    def names(self) -> Sequence[str]:
        """The instruments in the store now (a new one appears once it published)."""
        self._try(self._refresh_names, None)
        return tuple(self._zones)

    def _known(self, instrument: str) -> None:
        if instrument not in self._zones:
            raise KeyError(instrument)

    def checks(self, instrument: str) -> tuple[Check, ...]:
        self._known(instrument)
        own = self._own.get(instrument)
        return () if own is None else own.checks

    def timezone(self, instrument: str) -> str:
        self._known(instrument)
        return self._zones[instrument]

    def instrument(self, instrument: str) -> InstrumentNow:
        self._known(instrument)
        for now in self.instruments():
            if now.name == instrument:
                return now
        return InstrumentNow(name=instrument, available=False, note=UNREACHABLE)

    def instruments(self) -> list[InstrumentNow]:
        found: list[InstrumentNow] | None = self._try(self._all_now, None)
        if found is None:
            return [InstrumentNow(name=n, available=False, note=UNREACHABLE) for n in self._zones]
        return found

    def _all_now(self, conn: psycopg.Connection[Any]) -> list[InstrumentNow]:
        self._refresh_names(conn)
        by_status: dict[str, dict[str, int]] = {}
        for name, status, n in conn.execute(
            "SELECT instrument, status, count(*) FROM runs GROUP BY 1, 2"
        ):
            by_status.setdefault(name, {str(s): 0 for s in Status})[status] = int(n)
        messages: dict[str, dict[str, int]] = {}
        for name, status, n in conn.execute(
            "SELECT instrument, status, count(*) FROM messages GROUP BY 1, 2"
        ):
            messages.setdefault(name, {})[status] = int(n)
        problems: dict[str, list[Problem]] = {}
        for a in reader.open_alerts(conn):
            problems.setdefault(a.instrument, []).append(
                Problem(
                    check=a.check,
                    subject=a.subject,
                    severity=str(a.severity),
                    since=a.raised_at if a.raised_at is not None else _EPOCH,
                    run_file=None if a.run_file is None else shown(a.run_file),
                    value=a.value,
                )
            )
        out = []
        for row in conn.execute(_NOW).fetchall():
            name = str(row[0])
            last, measured = row[1 : 1 + _COLUMNS], row[1 + _COLUMNS :]
            sent = messages.get(name, {})
            out.append(
                InstrumentNow(
                    name=name,
                    available=True,
                    last_run=None if last[0] is None else run_view(last),
                    last_measured=None if measured[0] is None else run_view(measured),
                    problems=tuple(problems.get(name, ())),
                    runs_by_status=by_status.get(name, {str(s): 0 for s in Status}),
                    messages_delivered=sent.get("delivered", 0),
                    messages_failed=sent.get("abandoned", 0),
                    messages_pending=sent.get("pending", 0),
                )
            )
        return out

    def runs(self, instrument: str, start: datetime, end: datetime, *, limit: int) -> list[RunView]:
        """Runs acquired in ``[start, end)``, oldest first; the newest ``limit`` when more."""
        self._known(instrument)
        with self._reading() as conn:
            rows = conn.execute(
                f"SELECT {_RUN_COLUMNS} FROM runs WHERE instrument = %s"  # noqa: S608
                " AND acquired_at >= %s AND acquired_at < %s"
                " ORDER BY acquired_at DESC, file_key DESC LIMIT %s",
                (instrument, start, end, max(0, min(limit, reader.MAX_RUNS))),
            ).fetchall()
        return [run_view(r) for r in reversed(rows)]

    def before(
        self,
        instrument: str,
        metric: str,
        *,
        before: datetime,
        limit: int,
        applies_to: Sequence[str] = (),
    ) -> list[HistoryPoint]:
        """Oldest first: the metric in the last ``limit`` runs acquired before ``before`` (of
        the runs ``applies_to`` selects). The values come from the run's own metrics, where
        true/false stay booleans (``run_metrics`` holds them as 1/0)."""
        self._known(instrument)
        if limit <= 0:
            return []
        newest_first: list[HistoryPoint] = []
        cursor: tuple[datetime, str] | None = None
        with self._reading() as conn:
            while len(newest_first) < limit:
                # Keyset paging, newest first: the kind filter may drop rows, so read in pages.
                params: tuple[Any, ...] = (before,) if cursor is None else cursor
                rows = conn.execute(
                    _BEFORE_FIRST if cursor is None else _BEFORE_NEXT,
                    (instrument, metric, *params, _PAGE),
                ).fetchall()
                for file_name, acquired_at, value, status, _key in rows:
                    name = shown(file_name)
                    if not matches_applies_to(applies_to, name):
                        continue
                    newest_first.append(
                        HistoryPoint(
                            file_name=name,
                            acquired_at=acquired_at,
                            value=value if isinstance(value, bool | int | float) else None,
                            status=Status(status),
                        )
                    )
                    if len(newest_first) == limit:
                        break
                if len(rows) < _PAGE:
                    break
                cursor = (rows[-1][1], rows[-1][4])
        newest_first.reverse()
        return newest_first

    def change_mark(self) -> str:
        """Changes with every batch any daemon publishes (runs, alert changes, messages)."""
        row = self._try(
            lambda conn: conn.execute(
                "SELECT max(last_published_at), count(*) FROM instruments"
            ).fetchone(),
            None,
        )
        if row is None or row[0] is None:
            return "-"
        return f"{row[0].isoformat()}#{row[1]}"
