"""The read-only interface the floor page and the metrics endpoint read: ``FloorSource``.

A source answers four questions, each with frozen records and nothing to write:

- ``instruments()``: every instrument now (last run, its status and times, open problems and
  the counters the metrics endpoint exports), one ``InstrumentNow`` each; ``instrument(name)``
  the same for one;
- ``runs(instrument, start, end, limit=)``: one instrument's runs acquired in ``[start, end)``,
  oldest first, with their flat metrics and findings (the charts and the run table);
- ``before(instrument, metric, before=, limit=, applies_to=)``: the metric's values of the last
  ``limit`` runs acquired before a time (the Levey-Jennings baseline before the chosen range);
- ``checks(instrument)``: the lab's checks for that instrument (limits drawn on the charts;
  empty when the source does not know them); ``timezone(instrument)``: the IANA zone its
  times are shown in (``instrument.timezone``).

``change_mark()`` is a short text that changes whenever any instrument got a new judged run:
the page polls it to refresh without a full reload. Implementations must be safe to call from
several threads (the page server's worker threads, the metrics thread) and cheap: a scrape reads
``instruments()`` once. Times are aware UTC datetimes; names are shown through
``watcher.records.shown`` by the views, never trusted as HTML.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Protocol

if TYPE_CHECKING:
    from collections.abc import Mapping, Sequence
    from datetime import datetime

    from watcher.config import Check
    from watcher.records import Finding, HistoryPoint


@dataclass(frozen=True, slots=True, kw_only=True)
class Problem:
    """One open alert: a (check, subject) still out of spec, whichever channels hold it."""

    check: str
    subject: str  # the metric path's subject ("calibrant.lockmass-556.median_ppm", "signal")
    severity: str  # notice, warning, critical
    since: datetime
    run_file: str | None  # the file name of the run that raised it (never a path)
    value: float | bool | None


@dataclass(frozen=True, slots=True, kw_only=True)
class RunView:
    """One judged run as the views show it."""

    run_id: int
    file_name: str
    acquired_at: datetime
    judged_at: datetime
    status: str  # ok, notice, warning, critical, unreadable
    error: str | None
    metrics: Mapping[str, float | bool | None]
    findings: tuple[Finding, ...]


@dataclass(frozen=True, slots=True, kw_only=True)
class InstrumentNow:
    """An instrument as it stands: what its tile shows and what a scrape exports."""

    name: str
    available: bool  # False: its store cannot be read now (``note`` says why, without paths)
    note: str | None = None
    last_run: RunView | None = None
    # The newest run that was not unreadable: where the last calibrant, ion and TIC values
    # come from (an unreadable run has none, and must not blank them).
    last_measured: RunView | None = None
    problems: tuple[Problem, ...] = ()
    runs_by_status: Mapping[str, int] = field(default_factory=dict)
    messages_delivered: int = 0
    messages_failed: int = 0  # given up after retry_for (abandoned)
    messages_pending: int = 0
    queue_length: int = 0  # files queued or being measured


class FloorSource(Protocol):
    """What the floor page and the metrics endpoint read (see the module docstring)."""

    def names(self) -> Sequence[str]: ...

    def instruments(self) -> list[InstrumentNow]: ...

    def instrument(self, instrument: str) -> InstrumentNow: ...

    def runs(
        self, instrument: str, start: datetime, end: datetime, *, limit: int
    ) -> list[RunView]: ...

    def before(
        self,
        instrument: str,
        metric: str,
        *,
        before: datetime,
        limit: int,
        applies_to: Sequence[str] = (),
    ) -> list[HistoryPoint]: ...

    def checks(self, instrument: str) -> tuple[Check, ...]: ...

    def timezone(self, instrument: str) -> str: ...

    def change_mark(self) -> str: ...


class MultiSource:
    """Several sources behind one ``FloorSource`` (one SQLite store per instrument).

    Raises:
        ValueError: two sources name the same instrument (the page could not tell them apart).
    """

    def __init__(self, sources: Sequence[FloorSource]) -> None:
        self._by_name: dict[str, FloorSource] = {}
        for source in sources:
            for name in source.names():
                if name in self._by_name:
                    raise ValueError(f"two configs name the instrument {name!r}")
                self._by_name[name] = source
        self._sources = tuple(sources)

    def names(self) -> Sequence[str]:
        return tuple(self._by_name)

    def _of(self, instrument: str) -> FloorSource:
        return self._by_name[instrument]

    def instruments(self) -> list[InstrumentNow]:
        return [i for s in self._sources for i in s.instruments()]

    def instrument(self, instrument: str) -> InstrumentNow:
        return self._of(instrument).instrument(instrument)

    def runs(self, instrument: str, start: datetime, end: datetime, *, limit: int) -> list[RunView]:
        return self._of(instrument).runs(instrument, start, end, limit=limit)

    def before(
        self,
        instrument: str,
        metric: str,
        *,
        before: datetime,
        limit: int,
        applies_to: Sequence[str] = (),
    ) -> list[HistoryPoint]:
        return self._of(instrument).before(
            instrument, metric, before=before, limit=limit, applies_to=applies_to
        )

    def checks(self, instrument: str) -> tuple[Check, ...]:
        return self._of(instrument).checks(instrument)

    def timezone(self, instrument: str) -> str:
        return self._of(instrument).timezone(instrument)

    def change_mark(self) -> str:
        return "|".join(s.change_mark() for s in self._sources)
