"""The central store: every daemon also publishes its judged runs, alert changes and delivered
messages to one PostgreSQL database, and the facility's views read all instruments from there.

The local SQLite store stays each daemon's own durable state. ``queue`` fills a queue table in
it inside the daemon's own transactions; ``publish`` empties it into PostgreSQL on a thread of its
own (``schema`` creates and migrates the central tables); ``reader`` is the read side for
``status``, ``digest`` and a page server. Nothing here is on the path from a run to its alert.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher import entry_point_getattr

if TYPE_CHECKING:
    from watcher.central.publish import Publisher
    from watcher.central.reader import (
        instruments,
        metric_series,
        open_alerts,
        open_reader,
        runs,
    )

_ENTRY_POINTS = {
    "Publisher": "watcher.central.publish",
    "instruments": "watcher.central.reader",
    "metric_series": "watcher.central.reader",
    "open_alerts": "watcher.central.reader",
    "open_reader": "watcher.central.reader",
    "runs": "watcher.central.reader",
}

__all__ = ["Publisher", "instruments", "metric_series", "open_alerts", "open_reader", "runs"]

__getattr__ = entry_point_getattr(__name__, _ENTRY_POINTS)
