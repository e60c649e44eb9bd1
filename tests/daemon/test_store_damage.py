"""A damaged state database: the daemon and every command that opens it exit 2 with the file
named and what to do, no traceback, and the file is left byte for byte as it was."""

from __future__ import annotations

import hashlib
import os
import random
import sqlite3
from typing import TYPE_CHECKING

import pytest

import synth
from tests.helpers.cli import run_cli
from tests.helpers.daemon import write_lab_config
from watcher import config as config_mod
from watcher.daemon.main import Daemon
from watcher.store import db

if TYPE_CHECKING:
    from pathlib import Path


def _random_bytes_store(tmp_path: Path) -> Path:
    """A file of random bytes where the database should be (a bad copy, a disk fault)."""
    (tmp_path / "state").mkdir()
    path = tmp_path / "state" / db.DB_NAME
    path.write_bytes(random.Random(5).randbytes(64 * 1024))
    return path


def _overwritten_pages_store(tmp_path: Path) -> Path:
    """A real store with runs, its header page intact and the pages after it overwritten."""
    config = config_mod.load(write_lab_config(tmp_path))
    spec = synth.RunSpec(duration_s=10, ms2_per_cycle=0, background_peaks=20, seed=7)
    for n in range(3):
        synth.write_mzml(tmp_path / "exports" / f"QC_{n:03d}.mzML", spec, indexed=False)
        spec = synth.RunSpec(duration_s=10, ms2_per_cycle=0, background_peaks=20, seed=8 + n)
    daemon = Daemon(config)
    daemon.start()
    try:
        assert daemon.wait_idle(60.0)
    finally:
        daemon.close()  # checkpoints: everything is in the main file, no -wal left to read
    path = tmp_path / "state" / db.DB_NAME
    raw = sqlite3.connect(path)
    page_size = raw.execute("PRAGMA page_size").fetchone()[0]
    pages = raw.execute("PRAGMA page_count").fetchone()[0]
    raw.close()
    assert pages > 4
    with path.open("r+b") as fh:
        fh.seek(page_size)  # page 1 (the header and schema) stays: the file still opens
        fh.write(random.Random(6).randbytes(page_size * (pages - 1)))
    for suffix in ("-wal", "-shm"):
        (tmp_path / "state" / (db.DB_NAME + suffix)).unlink(missing_ok=True)
    return path


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.parametrize("damage", [_random_bytes_store, _overwritten_pages_store])
def test_the_daemon_and_the_commands_refuse_a_damaged_store_with_exit_2(
    tmp_path: Path, damage: object
) -> None:
    """``run``, ``status``, ``digest`` and ``check --record``: exit 2, the file named, the advice
    to move it aside, no traceback; the file is neither deleted nor changed."""
    path = damage(tmp_path)  # type: ignore[operator]
    cfg = write_lab_config(tmp_path)
    before = _digest(path)
    run_file = tmp_path / "exports" / "QC_new.mzML"
    spec = synth.RunSpec(duration_s=10, ms2_per_cycle=0, background_peaks=20, seed=11)
    synth.write_mzml(run_file, spec, indexed=False)
    for args in (
        ("run", "-c", str(cfg)),
        ("status", "-c", str(cfg)),
        ("status", "-c", str(cfg), "--json"),
        ("digest", "-c", str(cfg)),
        ("check", "-c", str(cfg), "--record", str(run_file)),
    ):
        done = run_cli(*args, cwd=tmp_path)
        assert done.returncode == 2, (args, done.stdout, done.stderr)
        assert str(path) in done.stderr, args
        assert "damaged" in done.stderr, args
        assert "move the file aside" in done.stderr, args
        assert "Traceback" not in done.stderr + done.stdout, args
        assert _digest(path) == before, args
    assert sorted(p.name for p in path.parent.iterdir() if p.name.startswith(db.DB_NAME)) in (
        [db.DB_NAME],
        [db.DB_NAME, db.DB_NAME + "-shm", db.DB_NAME + "-wal"],
    )


def test_moved_aside_the_daemon_starts_a_new_store(tmp_path: Path) -> None:
    """What the message advises works: with the damaged file moved, a new store is created."""
    path = _random_bytes_store(tmp_path)
    config = config_mod.load(write_lab_config(tmp_path))
    os.rename(path, path.with_name(db.DB_NAME + ".damaged"))
    daemon = Daemon(config)
    daemon.start()
    daemon.close()
    assert path.exists()
    assert path.with_name(db.DB_NAME + ".damaged").exists()
