"""Read-only views of the run history for people and monitoring: the floor page and metrics.

``source.FloorSource`` is the one interface the views read (instruments now, one instrument's
runs over a range, open alerts, counters); ``sqlite_source.SqliteFloorSource`` implements it on
the daemon's own SQLite store, so a central store can be added behind the same protocol.
``metrics`` turns a source into Prometheus/OpenMetrics families at scrape time, ``svg`` draws
the charts, ``app`` is the page server behind ``ionwarden serve``. Nothing here writes.
"""
