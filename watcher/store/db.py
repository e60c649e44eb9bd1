"""Open the state database with WAL, busy timeout and foreign keys; short write transactions.

Every writing transaction starts with ``BEGIN IMMEDIATE``: a deferred transaction that upgrades
a read snapshot to a write fails at once with "database is locked", whatever the busy timeout
(measured here, docs/reliability.md item 5). Never parse, hash or send inside ``write()``.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from watcher.errors import StoreError

DB_NAME = "ionwarden.sqlite3"
BUSY_TIMEOUT_MS = 10000
NETWORK_FS = ("nfs", "nfs4", "cifs", "smb3", "smbfs", "9p", "afs", "ceph", "glusterfs")

# Each table-owning module appends its CREATE statements here at import time (IF NOT EXISTS).
SCHEMAS: dict[str, str] = {}


def register_schema(owner: str, sql: str) -> None:
    """Declare the tables a store module owns; they are created when a database is opened."""
    SCHEMAS[owner] = sql


MOUNTINFO = Path("/proc/self/mountinfo")  # Linux; proc(5) gives the line format


def filesystem_type(path: Path) -> str | None:
    """The filesystem type of the mount holding ``path``, from ``MOUNTINFO``; None if unknown."""
    try:
        text = MOUNTINFO.read_text()
    except OSError:
        return None
    return mount_fs_type(text, path.resolve())


def mount_fs_type(mountinfo: str, target_path: Path) -> str | None:
    """The filesystem type of the longest mount point holding ``target_path`` in a mountinfo text.

    Each line reads ``id parent major:minor root mount-point options [tags] - type source opts``
    (proc(5)); spaces in a mount point are written ``\\040``.
    """
    lines = mountinfo.splitlines()
    target = str(target_path)
    best: tuple[int, str] | None = None
    for line in lines:
        left, _, right = line.partition(" - ")
        fields = left.split()
        if len(fields) < 5 or not right:
            continue
        mount_point = fields[4].replace("\\040", " ")
        inside = target == mount_point or target.startswith(mount_point.rstrip("/") + "/")
        if inside and (best is None or len(mount_point) > best[0]):
            best = (len(mount_point), right.split()[0])
    return best[1] if best else None


def is_network_fs(fs_type: str | None) -> bool:
    return fs_type is not None and (fs_type in NETWORK_FS or fs_type.startswith("fuse."))


def connect(state_dir: Path, *, daemon: bool = False, readonly: bool = False) -> sqlite3.Connection:
    """Open (creating if needed) the state database and every registered table.

    Args:
        state_dir: folder of the database; must be on a local filesystem (WAL needs shared memory).
        daemon: the long-running writer; also sets ``synchronous=FULL`` (every commit fsynced).
        readonly: CLI readers; opens ``mode=ro`` and never creates anything.

    Raises:
        StoreError: on a network filesystem, or without permission, with the folder named.
    """
    fs_type = filesystem_type(state_dir if state_dir.exists() else state_dir.parent)
    if is_network_fs(fs_type):
        raise StoreError(
            f"state_dir {state_dir} is on a network filesystem ({fs_type}); SQLite WAL needs a "
            "local disk: put state_dir on local storage"
        )
    path = state_dir / DB_NAME
    try:
        if readonly:
            if not path.exists():
                raise StoreError(f"no state database at {path} (has the daemon run yet?)")
            conn = sqlite3.connect(
                f"file:{path}?mode=ro",
                uri=True,
                timeout=BUSY_TIMEOUT_MS / 1000,
                isolation_level=None,
                check_same_thread=False,
            )
        else:
            state_dir.mkdir(parents=True, exist_ok=True)
            conn = sqlite3.connect(
                path,
                timeout=BUSY_TIMEOUT_MS / 1000,
                isolation_level=None,
                check_same_thread=False,
            )
        conn.row_factory = sqlite3.Row
        conn.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        conn.execute("PRAGMA foreign_keys = ON")
        if not readonly:
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute(f"PRAGMA synchronous = {'FULL' if daemon else 'NORMAL'}")
            _import_table_owners()
            with write(conn):
                for sql in SCHEMAS.values():
                    for statement in sql.split(";"):
                        if statement.strip():
                            conn.execute(statement)
        else:
            conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
    except sqlite3.OperationalError as exc:
        if "readonly" in str(exc) or "unable to open" in str(exc) or "permission" in str(exc):
            raise StoreError(
                f"no permission on state dir {state_dir}: {exc} (run as the service user, or "
                "make the folder group-writable for readers)"
            ) from exc
        raise StoreError(f"state database {path}: {exc}") from exc
    return conn


@contextmanager
def write(conn: sqlite3.Connection) -> Iterator[sqlite3.Connection]:
    """One short write transaction (``BEGIN IMMEDIATE`` ... ``COMMIT``, rolled back on error)."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield conn
    except BaseException:
        conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")


@contextmanager
def read(conn: sqlite3.Connection) -> Iterator[sqlite3.Connection]:
    """One short read transaction: a consistent snapshot across several SELECTs."""
    conn.execute("BEGIN")
    try:
        yield conn
    finally:
        conn.execute("COMMIT")


def checkpoint(conn: sqlite3.Connection) -> None:
    """Fold the WAL back into the database file (idle times and shutdown)."""
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")


def _import_table_owners() -> None:
    # Importing the owners registers their schemas; tolerate modules not written yet.
    import importlib

    for name in ("history", "jobs", "outbox"):
        try:
            importlib.import_module(f"watcher.store.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"watcher.store.{name}":
                raise
