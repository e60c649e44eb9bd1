"""Outbox tables on a real SQLite file: order per channel, idempotent enqueue, outcomes kept."""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher.records import AlertState, Finding, Severity
from watcher.store import db, outbox

if TYPE_CHECKING:
    from pathlib import Path


def _finding() -> Finding:
    return Finding(
        check="calibration drift",
        severity=Severity.WARNING,
        metric="calibrant.siloxane-445.median_ppm",
        subject="calibrant.siloxane-445.median_ppm",
        message="off",
        value=3.4,
        limit="outside [-3, 3]",
    )


def test_pending_is_oldest_first_per_channel_and_failed_blocks(tmp_path: Path) -> None:
    """next_pending gives each channel's oldest undelivered message, even while it is failing."""
    conn = db.connect(tmp_path)
    with db.write(conn):
        for i, ch in enumerate(["a", "b", "a"]):
            outbox.enqueue(
                conn,
                channel=ch,
                kind="alert",
                ref=f"run:{i}",
                created_at_s=i,
                title=f"t{i}",
                body="b",
            )
    first = outbox.next_pending(conn, "a")
    assert first is not None
    assert first.title == "t0"
    with db.write(conn):
        outbox.mark_failed(
            conn,
            first.message_id,
            error="FAILURE sending to json://h/****",
            next_attempt_at_s=100.0,
        )
    again = outbox.next_pending(conn, "a")
    assert again is not None
    assert (again.title, again.attempts, again.next_attempt_at_s) == ("t0", 1, 100.0)
    with db.write(conn):
        outbox.mark_delivered(conn, first.message_id, 5.0)
    after = outbox.next_pending(conn, "a")
    assert after is not None
    assert after.title == "t2"
    assert outbox.pending_count(conn) == 2
    conn.close()


def test_enqueue_same_channel_and_ref_twice_keeps_one(tmp_path: Path) -> None:
    """(channel, ref) is unique: a replayed run adds no second message."""
    conn = db.connect(tmp_path)
    with db.write(conn):
        ids = [
            outbox.enqueue(
                conn, channel="a", kind="alert", ref="run:1", created_at_s=0, title="t", body="b"
            )
            for _ in range(2)
        ]
    assert ids[0] is not None
    assert ids[1] is None
    assert outbox.pending_count(conn) == 1
    conn.close()


def test_alert_state_round_trip_and_clear(tmp_path: Path) -> None:
    """An open alert survives reopening the database; saving None deletes it."""
    conn = db.connect(tmp_path)
    state = AlertState(
        severity=Severity.CRITICAL, raised_at_s=1.0, last_sent_at_s=2.0, finding=_finding()
    )
    key = {
        "instrument": "Kestrel-2 Q-TOF",
        "check": "calibration drift",
        "subject": "calibrant.siloxane-445.median_ppm",
        "channel": "lab-chat",
    }
    with db.write(conn):
        outbox.save_alert(conn, state=state, run_file="QC_1.mzML", **key)
    conn.close()
    conn = db.connect(tmp_path)
    (alert,) = outbox.load_alerts(conn)
    assert alert.state == state
    assert alert.run_file == "QC_1.mzML"
    with db.write(conn):
        outbox.save_alert(conn, state=None, run_file=None, **key)
    assert outbox.load_alerts(conn) == []
    conn.close()
