"""The read functions a page server uses, against a real PostgreSQL server: one metric of one
instrument over a range (served by an index), runs over a range, and input that is only ever a
bound value (an instrument name with SQL in it finds nothing and breaks nothing)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING

import psycopg
import pytest

from tests.helpers.central import LocalStore
from tests.helpers.clock import Clock
from watcher.central import reader
from watcher.central.publish import Publisher
from watcher.config import Central

if TYPE_CHECKING:
    from pathlib import Path

T0 = datetime(2026, 10, 1, tzinfo=UTC).timestamp()
DAY_S = 86400.0
METRIC = "calibrant.siloxane-445.median_ppm"


@pytest.fixture
def published(facility: str, tmp_path: Path) -> str:
    """Two instruments, 40 daily runs each; ppm = day number / 10 (A) and minus that (B)."""
    for sign, name in ((1, "A-1"), (-1, "B-2")):
        clock = Clock(T0)
        store = LocalStore(tmp_path / name, clock, name)
        for day in range(40):
            store.run(f"QC_{day:03d}.mzML", ppm=sign * day / 10, step_s=DAY_S)
        publisher = Publisher(Central(url=facility), store.state_dir, name, clock=clock)
        while store.queued():
            publisher.step()
        publisher.close()
        store.close()
    return facility


def test_last_30_days_of_one_metric_for_one_instrument(published: str) -> None:
    end = datetime.fromtimestamp(T0 + 40 * DAY_S, UTC)
    start = end - timedelta(days=30)
    conn = reader.open_reader(published)
    try:
        points = reader.metric_series(conn, "A-1", METRIC, start=start, end=end)
    finally:
        conn.close()
    # runs of days 10..39 fall in [day 10, day 40): exactly 30, in time order, A's values only
    assert [p.value for p in points] == pytest.approx([d / 10 for d in range(10, 40)])
    assert [p.acquired_at for p in points] == sorted(p.acquired_at for p in points)


def test_the_range_query_is_an_index_range_scan(published: str) -> None:
    """With sequential scans off, PostgreSQL's plan is a scan of run_metrics' primary key
    (instrument, metric, acquired_at, ...): the index exists and fits the query."""
    with psycopg.connect(published, autocommit=True) as conn:
        conn.execute("SET enable_seqscan = off")
        plan = conn.execute(
            "EXPLAIN SELECT acquired_at, value, file_key FROM run_metrics WHERE instrument = %s"
            " AND metric = %s AND acquired_at >= %s AND acquired_at < %s ORDER BY acquired_at",
            ("A-1", METRIC, datetime(2026, 10, 5, tzinfo=UTC), datetime(2026, 11, 4, tzinfo=UTC)),
        ).fetchall()
    text = "\n".join(str(r[0]) for r in plan)
    assert "run_metrics_pkey" in text
    assert "Sort" not in text  # the index order is the answer's order


def test_runs_over_a_range_and_hostile_names(published: str) -> None:
    conn = reader.open_reader(published)
    try:
        start = datetime.fromtimestamp(T0 + 5 * DAY_S, UTC)
        end = datetime.fromtimestamp(T0 + 8 * DAY_S, UTC)
        runs = reader.runs(conn, "B-2", start=start, end=end, newest_first=False)
        assert [r.file_name for r in runs] == ["QC_005.mzML", "QC_006.mzML", "QC_007.mzML"]
        assert runs[0].metrics[METRIC] == pytest.approx(-0.5)
        assert reader.runs(conn, "A-1'; DROP TABLE runs; --") == []
        assert reader.open_alerts(conn, "<script>alert(1)</script>") == []
        assert sorted(reader.instrument_names(conn)) == ["A-1", "B-2"]
        assert reader.run_count(conn) == 80
        assert len(reader.runs(conn, "A-1", limit=10**9)) == 40  # limit capped, not an error
    finally:
        conn.close()


def test_the_reader_is_read_only(published: str) -> None:
    conn = reader.open_reader(published)
    try:
        with pytest.raises(psycopg.errors.ReadOnlySqlTransaction):
            conn.execute("DELETE FROM runs")
    finally:
        conn.close()
