"""Open the state database with WAL, busy timeout and foreign keys; short write transactions.

Every writing transaction starts with ``BEGIN IMMEDIATE``: a deferred transaction that upgrades
a read snapshot to a write fails at once with "database is locked", whatever the busy timeout
(measured here, docs/reliability.md item 5). Never parse, hash or send inside ``write()``.
"""

from __future__ import annotations

import os
import sqlite3
from contextlib import contextmanager, suppress
from pathlib import Path
from typing import TYPE_CHECKING

from watcher.errors import StoreCorruptError, StoreError, StoreTooNewError
from watcher.store import migrations

if TYPE_CHECKING:
    from collections.abc import Iterator

DB_NAME = "ionwarden.sqlite3"
BUSY_TIMEOUT_MS = 10000
NETWORK_FS = ("nfs", "nfs4", "cifs", "smb3", "smbfs", "9p", "afs", "ceph", "glusterfs")

SCHEMA_VERSION = migrations.SCHEMA_VERSION

# Each table-owning module appends its version-1 CREATE statements here at import time
# (IF NOT EXISTS); later changes are migrations (``watcher.store.migrations``), never edits here.
SCHEMAS: dict[str, str] = {}


def register_schema(owner: str, sql: str) -> None:
    """Declare the version-1 tables a store module owns; a new database is created with them."""
    SCHEMAS[owner] = sql


def path_value(path: Path | str) -> str | bytes:
    """How a file path is stored: text when it is valid UTF-8, else its bytes (``os.fsencode``).

    sqlite3 binds text as strict UTF-8, so a name with undecodable bytes (surrogates in Python)
    is bound as a BLOB instead: lossless, and the same path always gives the same value, so the
    identity lookups (``path = ?``, UNIQUE) still match. Valid names stay TEXT, as before.
    """
    text = str(path)
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        return os.fsencode(text)
    return text


def path_text(value: str | bytes) -> str:
    """The inverse of ``path_value``: the path as Python names it (``os.fsdecode`` of bytes)."""
    return os.fsdecode(value) if isinstance(value, bytes) else value


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
    """Open (creating if needed) the state database, upgraded to ``SCHEMA_VERSION``.

    A writer creates a new database at the current version and migrates an older one forward in
    one transaction (``upgrade``); a reader only checks that the version is the current one.

    Args:
        state_dir: folder of the database; must be on a local filesystem (WAL needs shared memory).
        daemon: the long-running writer; also sets ``synchronous=FULL`` (every commit fsynced).
        readonly: CLI readers; opens ``mode=ro`` and never creates anything.

    Raises:
        StoreError: on a network filesystem, or without permission, with the folder named; for
            a reader, also a database not yet upgraded by the daemon.
        StoreTooNewError: the database was written by a newer ionwarden (its schema version is
            above ``SCHEMA_VERSION``).
        StoreCorruptError: the file is not an SQLite database, or ``PRAGMA quick_check`` finds
            it damaged (checked at every open, before anything is written to it).
    """
    fs_type = filesystem_type(state_dir if state_dir.exists() else state_dir.parent)
    if is_network_fs(fs_type):
        raise StoreError(
            f"state_dir {state_dir} is on a network filesystem ({fs_type}); SQLite WAL needs a "
            "local disk: put state_dir on local storage"
        )
    path = state_dir / DB_NAME
    conn: sqlite3.Connection | None = None
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
        # Before journal_mode or an upgrade writes anything: a damaged file is left as found.
        _quick_check(conn, path)
        if not readonly:
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute(f"PRAGMA synchronous = {'FULL' if daemon else 'NORMAL'}")
            upgrade(conn, path)
        else:
            _check_readable(conn, path)
    except (StoreError, StoreTooNewError, StoreCorruptError):
        if conn is not None:
            conn.close()
        raise
    except sqlite3.OperationalError as exc:
        if conn is not None:
            conn.close()
        if "readonly" in str(exc) or "unable to open" in str(exc) or "permission" in str(exc):
            raise StoreError(
                f"no permission on state dir {state_dir}: {exc} (run as the service user, or "
                "make the folder group-writable for readers)"
            ) from exc
        raise StoreError(f"state database {path}: {exc}") from exc
    except sqlite3.DatabaseError as exc:  # "file is not a database", "disk image is malformed"
        if conn is not None:
            conn.close()
        raise StoreCorruptError(path, str(exc)) from exc
    return conn


def _quick_check(conn: sqlite3.Connection, path: Path) -> None:
    """``PRAGMA quick_check``: the b-tree structure of every page, without the index contents
    that ``integrity_check`` compares (linear in the file size, a fraction of a second for a
    year of runs). A new, empty file passes."""
    rows = conn.execute("PRAGMA quick_check(1)").fetchall()
    first = str(rows[0][0]) if rows else "no answer from quick_check"
    if first != "ok":
        raise StoreCorruptError(path, first)


def refuses_writes(exc: BaseException | None) -> bool:
    """True for SQLite's "cannot write now" errors: a full disk (SQLITE_FULL) or a failed write
    (SQLITE_IOERR_*: EFBIG past a file-size limit, ENOSPC on the -shm file). They pass when
    space returns, unlike a permission or a damaged file."""
    if not isinstance(exc, sqlite3.Error):
        return False
    name = str(getattr(exc, "sqlite_errorname", ""))
    return name == "SQLITE_FULL" or name.startswith("SQLITE_IOERR")


@contextmanager
def write(conn: sqlite3.Connection) -> Iterator[sqlite3.Connection]:
    """One short write transaction (``BEGIN IMMEDIATE`` ... ``COMMIT``, rolled back on error)."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield conn
        # Inside the try: COMMIT is where a full disk shows (the WAL frames are written then),
        # and a transaction left open would refuse every later BEGIN on this connection.
        conn.execute("COMMIT")
    except BaseException:
        if conn.in_transaction:  # SQLite may have rolled back already (an I/O error)
            with suppress(sqlite3.Error):
                conn.execute("ROLLBACK")
        raise


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


def user_version(conn: sqlite3.Connection) -> int:
    """The schema version stored in the database header (0: never set)."""
    return int(conn.execute("PRAGMA user_version").fetchone()[0])


def upgrade(
    conn: sqlite3.Connection,
    path: Path,
    steps: tuple[migrations.Migration, ...] = migrations.MIGRATIONS,
) -> int:
    """Bring the database to the version ``steps`` lead to (``SCHEMA_VERSION``) in one write
    transaction; returns the version found.

    Version 0 is a new file or a store written before versioning (it has the version-1 tables):
    the registered tables are created where missing and it is taken as version 1. The version is
    read after ``BEGIN IMMEDIATE``, so two connections opening at once upgrade only once.

    Raises:
        StoreTooNewError: the version found is above the target (nothing is changed).
    """
    target = migrations.target_version(steps)
    _import_table_owners()
    with write(conn):
        found = user_version(conn)
        if found > target:
            raise StoreTooNewError(path, found, target)
        if found == target:
            return found
        at = found
        if at == 0:
            for sql in SCHEMAS.values():
                for statement in sql.split(";"):
                    if statement.strip():
                        conn.execute(statement)
            at = migrations.BASE_VERSION
        for migration in migrations.pending(at, steps):
            migration.apply(conn)
        # Inside the transaction: PRAGMA user_version is part of the file header it commits.
        conn.execute(f"PRAGMA user_version = {target}")
    return found


def _check_readable(conn: sqlite3.Connection, path: Path) -> None:
    found = user_version(conn)
    if found > SCHEMA_VERSION:
        raise StoreTooNewError(path, found, SCHEMA_VERSION)
    if found < SCHEMA_VERSION:
        raise StoreError(
            f"state database {path} has schema version {found}, older than version "
            f"{SCHEMA_VERSION} that this ionwarden reads: start the daemon once to upgrade it"
        )


def _import_table_owners() -> None:
    # Importing the owners registers their schemas; tolerate modules not written yet.
    import importlib

    for name in ("history", "jobs", "outbox"):
        try:
            importlib.import_module(f"watcher.store.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"watcher.store.{name}":
                raise
