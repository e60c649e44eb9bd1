"""The committed store file of schema version 1 (tests/data/store/README.md), copied for a test."""

from __future__ import annotations

import shutil
from pathlib import Path

from watcher.store import db

FIXTURE = Path(__file__).resolve().parents[1] / "data" / "store" / "ionwarden-v1.sqlite3"


def copy_fixture(state_dir: Path) -> Path:
    """A writable copy of the version-1 store as ``state_dir``'s database."""
    state_dir.mkdir(parents=True)
    return Path(shutil.copyfile(FIXTURE, state_dir / db.DB_NAME))
