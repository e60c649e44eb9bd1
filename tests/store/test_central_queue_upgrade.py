"""Schema version 4 (the central publish queue) on real SQLite files: a version-3 store is
upgraded in place with its runs kept, and each store gets an id of its own."""

from __future__ import annotations

import re
import sqlite3
from typing import TYPE_CHECKING

import pytest

from tests.helpers.store import copy_fixture
from watcher.store import db, migrations

if TYPE_CHECKING:
    from pathlib import Path


def _tables(conn: sqlite3.Connection) -> set[str]:
    return {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}


def test_a_version_3_store_gains_the_queue_and_keeps_its_runs(tmp_path: Path) -> None:
    """The committed version-1 store (tests/data/store) taken to version 3 by the earlier
    steps, then opened by this ionwarden: version 4, an empty queue, the runs as they were."""
    path = copy_fixture(tmp_path / "state")
    raw = sqlite3.connect(path, isolation_level=None)
    db.upgrade(raw, path, migrations.MIGRATIONS[:2])
    assert db.user_version(raw) == 3
    assert "central_queue" not in _tables(raw)
    runs_before = raw.execute("SELECT run_id, file_name, status FROM runs ORDER BY 1").fetchall()
    raw.close()
    assert runs_before  # the fixture has runs (tests/data/store/README.md)

    conn = db.connect(tmp_path / "state", daemon=True)
    assert db.user_version(conn) == db.SCHEMA_VERSION >= 4
    assert {"central_queue", "central_alerts_seen", "central_messages_seen"} <= _tables(conn)
    assert conn.execute("SELECT count(*) FROM central_queue").fetchone()[0] == 0
    runs_after = conn.execute("SELECT run_id, file_name, status FROM runs ORDER BY 1").fetchall()
    assert [tuple(r) for r in runs_after] == runs_before
    store_id = conn.execute(
        "SELECT value FROM daemon_state WHERE key = 'central.store_id'"
    ).fetchone()[0]
    assert re.fullmatch(r"[0-9a-f]{32}", store_id)
    conn.close()


def test_every_store_has_its_own_id(tmp_path: Path) -> None:
    """Two new stores: two ids (16 random bytes each), so their queue entries never collide."""
    ids = []
    for name in ("a", "b"):
        conn = db.connect(tmp_path / name, daemon=True)
        ids.append(
            conn.execute(
                "SELECT value FROM daemon_state WHERE key = 'central.store_id'"
            ).fetchone()[0]
        )
        conn.close()
    assert ids[0] != ids[1]


def test_the_queue_refuses_an_unknown_kind(tmp_path: Path) -> None:
    """Only run, alert and message entries exist (a CHECK constraint)."""
    conn = db.connect(tmp_path / "state", daemon=True)
    with pytest.raises(sqlite3.IntegrityError, match="CHECK"):
        conn.execute(
            "INSERT INTO central_queue (kind, payload, queued_at_s) VALUES ('other', '{}', 0)"
        )
    conn.close()
