"""Prometheus/OpenMetrics numbers of a ``FloorSource``, computed at scrape time.

``FloorCollector`` is a custom prometheus_client collector: every scrape reads
``source.instruments()`` once (a few indexed SELECTs per store, ``watcher.view.sqlite_source``)
and turns it into metric families; nothing is counted in memory between scrapes, so the numbers
are the store's and survive restarts. ``MetricsServer`` serves a registry holding only that
collector on its own thread (prometheus_client's ``start_http_server``, a threading WSGI
server): a slow scraper never blocks the daemon's main loop or its worker, which share nothing
with it but the SQLite file (WAL: readers never block the writer).

Names carry the ``ionwarden_`` prefix and their unit (``_ppm``, ``_seconds``), as the
Prometheus naming guide asks (https://prometheus.io/docs/practices/naming/). Labels are
``instrument``, ``calibrant``, ``ion``, ``check``, plus ``status``/``severity`` with a fixed set
of values; file names never become labels (one series per run would grow without bound).
"""

from __future__ import annotations

import threading  # noqa: TC003 - used at run time (the server's thread)
import time
from typing import TYPE_CHECKING, Any

from prometheus_client.core import CounterMetricFamily, GaugeMetricFamily
from prometheus_client.registry import CollectorRegistry

from watcher.records import Status

if TYPE_CHECKING:
    from collections.abc import Callable, Iterator

    from prometheus_client.core import Metric

    from watcher.config import Listen
    from watcher.view.source import FloorSource, InstrumentNow

SEVERITIES = ("notice", "warning", "critical")
STATUSES = tuple(str(s) for s in Status)


def _last_values(now: InstrumentNow, group: str, field: str) -> list[tuple[str, float]]:
    """(subject, value) of ``<group>.<subject>.<field>`` in the last measured run's metrics."""
    run = now.last_measured
    if run is None:
        return []
    head, tail = f"{group}.", f".{field}"
    out: list[tuple[str, float]] = []
    for path, value in run.metrics.items():
        if path.startswith(head) and path.endswith(tail) and value is not None:
            out.append((path[len(head) : -len(tail)], float(value)))
    return sorted(out)


class FloorCollector:
    """prometheus_client collector over a ``FloorSource`` (see the module docstring)."""

    def __init__(self, source: FloorSource, *, clock: Callable[[], float] = time.time) -> None:
        self._source = source
        self._clock = clock

    def collect(self) -> Iterator[Metric]:
        started = time.perf_counter()
        now_s = self._clock()
        instruments = self._source.instruments()
        inst = ["instrument"]
        up = GaugeMetricFamily(
            "ionwarden_store_up", "1 when the instrument's store could be read", labels=inst
        )
        status = GaugeMetricFamily(
            "ionwarden_last_run_status",
            "1 for the last judged run's status, 0 for the others",
            labels=[*inst, "status"],
        )
        acquired = GaugeMetricFamily(
            "ionwarden_last_run_acquired_timestamp_seconds",
            "acquisition time of the last judged run (epoch seconds)",
            labels=inst,
        )
        judged = GaugeMetricFamily(
            "ionwarden_last_run_judged_timestamp_seconds",
            "when the last run was judged (epoch seconds)",
            labels=inst,
        )
        since = GaugeMetricFamily(
            "ionwarden_since_last_run_seconds",
            "seconds from the last judged run's acquisition to the scrape",
            labels=inst,
        )
        ppm = GaugeMetricFamily(
            "ionwarden_calibrant_median_error_ppm",
            "last run's median calibrant mass error (ppm)",
            labels=[*inst, "calibrant"],
        )
        found = GaugeMetricFamily(
            "ionwarden_expected_ion_found",
            "1 when the expected ion was found in the last run, 0 when not (absent: not searched)",
            labels=[*inst, "ion"],
        )
        intensity = GaugeMetricFamily(
            "ionwarden_expected_ion_apex_intensity",
            "last run's apex intensity of the expected ion (detector counts)",
            labels=[*inst, "ion"],
        )
        tic = GaugeMetricFamily(
            "ionwarden_tic_median",
            "median MS1 total ion current of the last run measured (detector counts)",
            labels=inst,
        )
        open_alerts = GaugeMetricFamily(
            "ionwarden_open_alerts",
            "open alerts (check and subject still out of spec) by severity",
            labels=[*inst, "severity"],
        )
        by_check = GaugeMetricFamily(
            "ionwarden_check_open_alerts", "open alerts per check", labels=[*inst, "check"]
        )
        runs = CounterMetricFamily(
            "ionwarden_runs_judged", "runs judged, by status", labels=[*inst, "status"]
        )
        unreadable = CounterMetricFamily(
            "ionwarden_runs_unreadable", "runs judged unreadable", labels=inst
        )
        delivered = CounterMetricFamily(
            "ionwarden_messages_delivered", "messages delivered to a channel", labels=inst
        )
        failed = CounterMetricFamily(
            "ionwarden_messages_failed",
            "messages given up after alerts.retry_for (never delivered)",
            labels=inst,
        )
        pending = GaugeMetricFamily(
            "ionwarden_messages_pending", "messages waiting to be delivered", labels=inst
        )
        queue = GaugeMetricFamily(
            "ionwarden_queue_length", "run files queued or being measured", labels=inst
        )
        for now in instruments:
            name = [now.name]
            up.add_metric(name, 1.0 if now.available else 0.0)
            if not now.available:
                continue
            run = now.last_run
            if run is not None:
                for s in STATUSES:
                    status.add_metric([now.name, s], 1.0 if run.status == s else 0.0)
                acquired.add_metric(name, run.acquired_at.timestamp())
                judged.add_metric(name, run.judged_at.timestamp())
                since.add_metric(name, max(0.0, now_s - run.acquired_at.timestamp()))
            measured = now.last_measured
            tic_value = None if measured is None else measured.metrics.get("signal.tic_median")
            if tic_value is not None:
                tic.add_metric(name, float(tic_value))
            for calibrant, value in _last_values(now, "calibrant", "median_ppm"):
                ppm.add_metric([now.name, calibrant], value)
            for ion, value in _last_values(now, "expected_ion", "found"):
                found.add_metric([now.name, ion], value)
            for ion, value in _last_values(now, "expected_ion", "apex_intensity"):
                intensity.add_metric([now.name, ion], value)
            counts = dict.fromkeys(SEVERITIES, 0)
            per_check: dict[str, int] = {}
            for p in now.problems:
                counts[p.severity] = counts.get(p.severity, 0) + 1
                per_check[p.check] = per_check.get(p.check, 0) + 1
            for severity, n in counts.items():
                open_alerts.add_metric([now.name, severity], float(n))
            for check, n in sorted(per_check.items()):
                by_check.add_metric([now.name, check], float(n))
            for s in STATUSES:
                runs.add_metric([now.name, s], float(now.runs_by_status.get(s, 0)))
            unreadable.add_metric(name, float(now.runs_by_status.get("unreadable", 0)))
            delivered.add_metric(name, float(now.messages_delivered))
            failed.add_metric(name, float(now.messages_failed))
            pending.add_metric(name, float(now.messages_pending))
            queue.add_metric(name, float(now.queue_length))
        yield from (up, status, acquired, judged, since, ppm, found, intensity, tic)
        yield from (open_alerts, by_check, runs, unreadable, delivered, failed, pending, queue)
        took = GaugeMetricFamily(
            "ionwarden_scrape_read_seconds", "time this scrape took to read the stores"
        )
        took.add_metric([], time.perf_counter() - started)
        yield took


def registry_for(source: FloorSource) -> CollectorRegistry:
    """A registry holding only the floor collector (no process or platform collectors)."""
    registry = CollectorRegistry(auto_describe=False)
    registry.register(FloorCollector(source))
    return registry


class MetricsServer:
    """The endpoint on its own thread: ``start()`` binds (raising OSError when it cannot),
    ``stop()`` shuts it down."""

    def __init__(self, source: FloorSource, listen: Listen) -> None:
        self._registry = registry_for(source)
        self._listen = listen
        self._server: Any = None
        self._thread: threading.Thread | None = None

    def start(self) -> None:
        from prometheus_client import start_http_server

        self._server, self._thread = start_http_server(
            self._listen.port, addr=self._listen.host, registry=self._registry
        )

    @property
    def port(self) -> int:
        return int(self._server.server_address[1]) if self._server is not None else 0

    def stop(self) -> None:
        if self._server is not None:
            self._server.shutdown()
            self._server.server_close()
            self._server = None
        if self._thread is not None:
            self._thread.join(5.0)
            self._thread = None
