"""A throwaway PostgreSQL cluster for the central-store tests: ``initdb`` + ``pg_ctl`` from the
Debian ``postgresql`` package, a Unix socket in a folder of its own, and 127.0.0.1 with
password authentication (scram-sha-256) for the tests that pass a password.

``initdb`` refuses to run as root (it says so and exits), and CI runs as root: the cluster then
belongs to the ``postgres`` system user and every server command runs through
``runuser -u postgres``. The cluster's folder is made readable by that user. Without the
binaries the tests skip, except under ``CI``, where a missing server fails the run.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import socket
import subprocess
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import pytest

# Where Debian puts the server binaries; ``initdb`` on PATH is tried too.
_BIN_DIRS = (
    "/usr/lib/postgresql/17/bin",
    "/usr/lib/postgresql/16/bin",
    "/usr/lib/postgresql/15/bin",
)


def find_bindir() -> Path | None:
    """The folder holding ``initdb``, ``pg_ctl`` and ``postgres``, or None."""
    for d in _BIN_DIRS:
        if (Path(d) / "pg_ctl").is_file() and (Path(d) / "initdb").is_file():
            return Path(d)
    found = shutil.which("pg_ctl")
    if found and (Path(found).parent / "initdb").exists():
        return Path(found).parent
    return None


def require_bindir() -> Path:
    """The server binaries, or skip (fail under ``CI``: the tests never skip silently there)."""
    bindir = find_bindir()
    if bindir is None:
        message = "PostgreSQL server binaries not found (apt-get install postgresql)"
        if os.environ.get("CI"):
            pytest.fail(message)
        pytest.skip(message)
    return bindir


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@dataclass
class Postgres:
    """One cluster: ``start()``, ``stop()``, ``kill()`` (SIGKILL of the postmaster), databases."""

    bindir: Path
    root: Path
    port: int = field(default_factory=_free_port)
    as_postgres: bool = field(default_factory=lambda: os.geteuid() == 0)
    password: str = "lab-secret-7d1c"  # noqa: S105 - a throwaway test server's; of the role ``lab`` on 127.0.0.1 (scram-sha-256)
    _n: int = 0

    @property
    def data(self) -> Path:
        return self.root / "data"

    @property
    def sockets(self) -> Path:
        return self.root / "sock"

    @property
    def log(self) -> Path:
        return self.root / "log" / "server.log"

    def _cmd(self, *args: str) -> list[str]:
        return ["runuser", "-u", "postgres", "--", *args] if self.as_postgres else list(args)

    def _run(self, *args: str, timeout_s: float = 60.0) -> None:
        done = subprocess.run(
            self._cmd(*args), capture_output=True, text=True, timeout=timeout_s, check=False
        )
        if done.returncode != 0:
            raise RuntimeError(f"{args[0]} failed ({done.returncode}): {done.stderr.strip()}")

    def init(self) -> None:
        self.root.chmod(0o755)
        for d in (self.data, self.sockets, self.log.parent):
            d.mkdir(mode=0o700)
            if self.as_postgres:
                shutil.chown(d, "postgres", "postgres")
        self._run(
            str(self.bindir / "initdb"),
            "-D",
            str(self.data),
            "-U",
            "postgres",
            "-A",
            "trust",
            "-E",
            "UTF8",
            "--locale=C",
            "--no-sync",
        )
        hba = "local all all trust\nhost all all 127.0.0.1/32 scram-sha-256\n"
        conf = (
            f"port = {self.port}\nlisten_addresses = '127.0.0.1'\n"
            f"unix_socket_directories = '{self.sockets}'\n"
            # fsync off only: a killed server's WAL is still in the page cache. synchronous_commit
            # stays on, else a commit it acknowledged can vanish with a SIGKILL (seen here).
            "fsync = off\nfull_page_writes = off\n"
            "password_encryption = 'scram-sha-256'\nmax_connections = 60\n"
        )
        # written through the server's user: the data folder is its own, mode 0700
        for name, text in (("pg_hba.conf", hba), ("postgresql.auto.conf", conf)):
            target = self.data / name
            target.write_text(text)
            if self.as_postgres:
                shutil.chown(target, "postgres", "postgres")
        self.start()
        self.sql(f"CREATE ROLE lab LOGIN PASSWORD '{self.password}'")

    def start(self) -> None:
        self._run(
            str(self.bindir / "pg_ctl"), "-D", str(self.data), "-l", str(self.log), "-w", "start"
        )

    def stop(self, mode: str = "fast") -> None:
        self._run(str(self.bindir / "pg_ctl"), "-D", str(self.data), "-m", mode, "-w", "stop")

    def postmaster_pid(self) -> int | None:
        pid_file = self.data / "postmaster.pid"
        try:
            return int(pid_file.read_text().split()[0])
        except (OSError, ValueError, IndexError):
            return None

    def kill(self) -> None:
        """SIGKILL the postmaster and its backends: the server dies mid-whatever."""
        pid = self.postmaster_pid()
        if pid is None:
            return
        # The backends are the postmaster's children; kill them too, as a crash would.
        children = subprocess.run(
            ["pgrep", "-P", str(pid)], capture_output=True, text=True, check=False
        ).stdout.split()
        for p in [pid, *map(int, children)]:
            with contextlib.suppress(ProcessLookupError):
                os.kill(p, signal.SIGKILL)
        deadline = time.monotonic() + 10
        while time.monotonic() < deadline:
            try:
                os.kill(pid, 0)
            except ProcessLookupError:
                break
            time.sleep(0.05)
        (self.data / "postmaster.pid").unlink(missing_ok=True)

    def url(self, database: str = "postgres", user: str = "postgres") -> str:
        """Over the Unix socket (trust): no password."""
        return f"postgresql://{user}@/{database}?host={self.sockets}&port={self.port}"

    def tcp_url(self, database: str, *, password: str | None = None) -> str:
        """Over 127.0.0.1 as ``lab``, who needs a password (scram-sha-256)."""
        auth = "lab" if password is None else f"lab:{password}"
        return f"postgresql://{auth}@127.0.0.1:{self.port}/{database}"

    def sql(self, statement: str, database: str = "postgres") -> list[tuple[object, ...]]:
        import psycopg

        with psycopg.connect(self.url(database), autocommit=True) as conn:
            cur = conn.execute(statement)  # type: ignore[arg-type]
            return cur.fetchall() if cur.description else []

    def new_database(self, prefix: str = "facility") -> str:
        """A fresh database owned by ``lab``; returns its name."""
        self._n += 1
        name = f"{prefix}_{os.getpid()}_{self._n}"
        self.sql(f"CREATE DATABASE {name} OWNER lab")
        return name

    def close(self) -> None:
        with contextlib.suppress(RuntimeError, subprocess.TimeoutExpired):
            if self.postmaster_pid() is not None:
                self.stop("immediate")
        shutil.rmtree(self.root, ignore_errors=True)


def make_cluster(prefix: str = "ionwarden-pg-") -> Postgres:
    """A new, running cluster in a fresh folder under the system's temp folder (which the
    ``postgres`` user can reach: pytest's own tmp folders are private to root)."""
    bindir = require_bindir()
    pg = Postgres(bindir, Path(tempfile.mkdtemp(prefix=prefix)))
    try:
        pg.init()
    except BaseException:
        pg.close()
        raise
    return pg
