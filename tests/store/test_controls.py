"""The controls' tables on real SQLite files: the upgrade of the committed version-1 store to
version 5, and the history that starts again after a baseline-resetting event."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING

from tests.helpers.records import make_metrics
from tests.helpers.store import copy_fixture
from watcher.records import RunFile, Status, TrendState, Verdict
from watcher.store import controls, db, history, outbox

if TYPE_CHECKING:
    import sqlite3

T0 = datetime(2026, 11, 27, 18, 0, tzinfo=UTC)
PATH = "calibrant.siloxane-445.median_ppm"


def test_the_version_1_store_upgrades_to_the_controls_tables(tmp_path: Path) -> None:
    """The committed v1 store (tests/data/store/README.md) opens at version 5: its open alert is
    kept, not acknowledged, can be acknowledged, and the new tables take rows."""
    copy_fixture(tmp_path / "state")
    conn = db.connect(tmp_path / "state", daemon=True)
    assert db.user_version(conn) == db.SCHEMA_VERSION >= 5
    (alert,) = outbox.load_alerts(conn)
    assert alert.state.acked_at_s is None
    with db.write(conn):
        outbox.save_alert(
            conn,
            instrument=alert.instrument,
            check=alert.check,
            subject=alert.subject,
            channel=alert.channel,
            state=alert.state.__class__(
                severity=alert.state.severity,
                raised_at_s=alert.state.raised_at_s,
                last_sent_at_s=alert.state.last_sent_at_s,
                finding=alert.state.finding,
                acked_at_s=123.0,
            ),
            run_file=None,
        )
        silence_id = controls.add_silence(
            conn,
            instrument=alert.instrument,
            check=None,
            subject=None,
            reason="cleaning",
            by="dana",
            start_s=100.0,
            end_s=200.0,
        )
        controls.log_entry(conn, "silence.added", 100.0, silence_id=silence_id, kind="x")
    assert outbox.load_alerts(conn)[0].state.acked_at_s == 123.0
    assert [s.silence_id for s in controls.silences(conn, instrument=alert.instrument)] == [1]
    assert controls.silences(conn, instrument=alert.instrument, active_at_s=250.0) == []
    (entry,) = controls.unlogged(conn)
    assert entry.fields == {"silence_id": 1, "kind": "x"}
    conn.close()


def _record(conn: sqlite3.Connection, n: int, ppm: float) -> None:
    at = T0 + timedelta(hours=n)
    verdict = Verdict(
        run_file=RunFile(path=Path(f"/x/QC_{n:02d}.mzML"), size=n, mtime_ns=n),
        status=Status.OK,
        acquired_at=at,
        metrics=make_metrics(siloxane_ppm=ppm, acquired_at=at),
        trend_states=(
            TrendState(
                check="drift",
                path=PATH,
                spec="ewma",
                n_runs=n,
                ewma=ppm,
                cusum_hi=None,
                cusum_lo=None,
            ),
        ),
    )
    history.record_verdict(conn, verdict)


def test_history_starts_again_after_a_resetting_note(tmp_path: Path) -> None:
    """Four runs before a column change, two after: the rules see only the two, and the EWMA
    state of the last run before the change is not carried over; a note without reset hides
    nothing."""
    conn = db.connect(tmp_path / "state", daemon=True)
    with db.write(conn):
        for n, ppm in enumerate([4.0, 4.1, 3.9, 4.2, 0.1, -0.1], start=1):
            _record(conn, n, ppm)
        controls.add_note(
            conn,
            instrument="Kestrel-2 Q-TOF",
            at=T0 + timedelta(hours=2, minutes=30),
            kind="other",
            text="spray needle looked at",
            reset_baselines=False,
            by="dana",
            recorded_at_s=0.0,
        )
    plain = controls.ResettableHistory(conn, instrument="Kestrel-2 Q-TOF")
    after = T0 + timedelta(hours=7)
    assert len(plain.series(PATH, before=after, limit=20)) == 6
    with db.write(conn):
        controls.add_note(
            conn,
            instrument="Kestrel-2 Q-TOF",
            at=T0 + timedelta(hours=4, minutes=30),
            kind="column",
            text="column replaced",
            reset_baselines=True,
            by="dana",
            recorded_at_s=0.0,
        )
    reset = controls.ResettableHistory(conn, instrument="Kestrel-2 Q-TOF")
    assert [p.value for p in reset.series(PATH, before=after, limit=20)] == [0.1, -0.1]
    # Before the event, the history is as it was: the reset does not reach back.
    assert len(reset.series(PATH, before=T0 + timedelta(hours=4, minutes=10), limit=20)) == 4
    # The first run after the event starts its EWMA afresh; the second continues the first.
    first_after = T0 + timedelta(hours=5)
    assert reset.trend_state("drift", PATH, before=first_after) is None
    state = reset.trend_state("drift", PATH, before=after)
    assert state is not None
    assert state.n_runs == 6
    # Another instrument's event is not this one's.
    other = controls.ResettableHistory(conn, instrument="Osprey-1")
    assert len(other.series(PATH, before=after, limit=20)) == 6
    conn.close()
