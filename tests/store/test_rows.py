"""Rows of a real SQLite file become records field by field, by column name."""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from pathlib import Path

from watcher.store.rows import columns, from_row


@dataclass(frozen=True, slots=True, kw_only=True)
class _Item:
    id: int
    path: Path
    note: str | None


def test_row_fields_by_name_with_conversions(tmp_path: Path) -> None:
    """Columns map to fields by name whatever their order; converted fields win over the row."""
    conn = sqlite3.connect(tmp_path / "t.sqlite3")
    conn.row_factory = sqlite3.Row
    conn.execute("CREATE TABLE t (note TEXT, extra INTEGER, path TEXT, id INTEGER)")
    conn.execute("INSERT INTO t VALUES ('kept', 9, '/data/QC_1.mzML', 7)")
    row = conn.execute(f"SELECT {columns(_Item)}, extra FROM t").fetchone()  # noqa: S608
    item = from_row(_Item, row, path=Path(row["path"]))
    conn.close()
    assert columns(_Item) == "id, path, note"
    assert item == _Item(id=7, path=Path("/data/QC_1.mzML"), note="kept")
