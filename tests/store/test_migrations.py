"""Schema versions on real SQLite files: fresh files, pre-versioning stores, one-transaction
upgrades, and stores written by a newer version refused by name."""

from __future__ import annotations

import sqlite3
from typing import TYPE_CHECKING

import pytest

from watcher.errors import StoreError, StoreTooNewError
from watcher.store import db, migrations

if TYPE_CHECKING:
    from pathlib import Path


def _indexes(conn: sqlite3.Connection) -> set[str]:
    rows = conn.execute("SELECT name FROM sqlite_master WHERE type = 'index'").fetchall()
    return {r[0] for r in rows if not r[0].startswith("sqlite_autoindex")}


def _pre_versioning_store(state: Path) -> None:
    """The layout the release before versioning wrote: version-1 tables, user_version 0."""
    state.mkdir()
    db._import_table_owners()
    raw = sqlite3.connect(state / db.DB_NAME)
    for sql in db.SCHEMAS.values():
        raw.executescript(sql)
    raw.execute(
        "INSERT INTO jobs (path, size, mtime_ns, state, first_seen_s, updated_s, run_id, verdict)"
        " VALUES ('/x/QC_1.mzML', 10, 1, 'done', 1.0, 2.0, 1, x'80049500')"
    )
    raw.commit()
    raw.close()


def test_a_fresh_file_gets_the_current_version_and_schema(tmp_path: Path) -> None:
    conn = db.connect(tmp_path / "state", daemon=True)
    assert db.user_version(conn) == db.SCHEMA_VERSION == len(migrations.MIGRATIONS) + 1
    assert "jobs_by_updated" in _indexes(conn)
    assert "trend_states_by_time" in _indexes(conn)
    conn.close()


def test_pre_versioning_store_is_taken_as_version_1_and_upgraded(tmp_path: Path) -> None:
    """user_version 0 with today's tables: stamped, migrated to 2, its job row kept."""
    _pre_versioning_store(tmp_path / "state")
    conn = db.connect(tmp_path / "state", daemon=True)
    assert db.user_version(conn) == db.SCHEMA_VERSION
    assert "jobs_by_updated" in _indexes(conn)
    row = conn.execute("SELECT path, state, run_id, verdict FROM jobs").fetchone()
    # Migration 2 empties the pickled verdicts: nothing may unpickle them any more.
    assert tuple(row) == ("/x/QC_1.mzML", "done", 1, None)
    conn.close()


def test_a_migrated_store_has_the_schema_of_a_fresh_one(tmp_path: Path) -> None:
    """Both paths to the current version end with the same tables, columns and indexes."""
    _pre_versioning_store(tmp_path / "old")
    old = db.connect(tmp_path / "old", daemon=True)
    new = db.connect(tmp_path / "new", daemon=True)
    dump = "SELECT type, name, tbl_name, sql FROM sqlite_master ORDER BY type, name"
    assert old.execute(dump).fetchall() == new.execute(dump).fetchall()
    old.close()
    new.close()


def test_a_failing_migration_leaves_the_store_untouched(tmp_path: Path) -> None:
    """All pending steps and the new user_version commit together, or none of them does."""
    _pre_versioning_store(tmp_path / "state")
    failing = (
        *migrations.MIGRATIONS,
        migrations.Migration(
            version=db.SCHEMA_VERSION + 1,
            summary="broken",
            sql="CREATE TABLE extra (x); SELECT * FROM missing",
        ),
    )
    conn = sqlite3.connect(tmp_path / "state" / db.DB_NAME, isolation_level=None)
    with pytest.raises(sqlite3.OperationalError, match="missing"):
        db.upgrade(conn, tmp_path / "state" / db.DB_NAME, failing)
    assert db.user_version(conn) == 0
    assert "jobs_by_updated" not in _indexes(conn)  # step 2 rolled back with the broken one
    assert conn.execute("SELECT verdict FROM jobs").fetchone()[0] is not None
    tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert "extra" not in tables
    conn.close()


def test_opening_twice_upgrades_once(tmp_path: Path) -> None:
    _pre_versioning_store(tmp_path / "state")
    first = db.connect(tmp_path / "state", daemon=True)
    second = db.connect(tmp_path / "state", daemon=True)
    assert db.upgrade(second, tmp_path / "state" / db.DB_NAME) == db.SCHEMA_VERSION
    first.close()
    second.close()


@pytest.mark.parametrize("readonly", [False, True])
def test_a_store_from_a_newer_version_is_refused_naming_file_and_versions(
    tmp_path: Path, readonly: bool
) -> None:
    db.connect(tmp_path / "state").close()
    path = tmp_path / "state" / db.DB_NAME
    raw = sqlite3.connect(path)
    raw.execute(f"PRAGMA user_version = {db.SCHEMA_VERSION + 1}")
    raw.commit()
    raw.close()
    with pytest.raises(StoreTooNewError) as caught:
        db.connect(tmp_path / "state", daemon=True, readonly=readonly)
    text = str(caught.value)
    assert str(path) in text
    assert f"version {db.SCHEMA_VERSION + 1}" in text
    assert f"version {db.SCHEMA_VERSION} " in text
    assert caught.value.found_version == db.SCHEMA_VERSION + 1
    raw = sqlite3.connect(path)
    assert raw.execute("PRAGMA user_version").fetchone()[0] == db.SCHEMA_VERSION + 1  # untouched
    raw.close()


def test_a_reader_does_not_upgrade_an_older_store(tmp_path: Path) -> None:
    """CLI readers open read-only: they name the version and leave the upgrade to the daemon."""
    _pre_versioning_store(tmp_path / "state")
    with pytest.raises(StoreError, match=r"schema version 0, older .* start the daemon"):
        db.connect(tmp_path / "state", readonly=True)
    db.connect(tmp_path / "state", daemon=True).close()
    db.connect(tmp_path / "state", readonly=True).close()


def test_migrations_must_follow_one_another() -> None:
    step = migrations.Migration(version=3, summary="skips 2", sql="SELECT 1")
    with pytest.raises(RuntimeError, match="expected version 2, got 3"):
        migrations.target_version((step,))
    assert migrations.target_version(()) == migrations.BASE_VERSION
