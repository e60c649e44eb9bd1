"""`ionwarden demo --facility`: three instruments, three daemons, one PostgreSQL central store.

The same bundled runs as ``ionwarden demo`` arrive at three invented instruments of the
*Larkfield Metabolomics Core*, each watched by its own ``ionwarden run`` with ``central.url``
pointing at one throwaway PostgreSQL cluster made under the demo's folder (``initdb`` and
``pg_ctl`` of the installed PostgreSQL server; as root, the cluster belongs to the ``postgres``
system user, since ``initdb`` refuses root). At the end it prints ``status --all`` from the
central store, stops the daemons and the server, and says how to start the server again.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
from datetime import datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

import yaml

from watcher.cli.demo import _arrive, _judged, _Receiver, demo_drop_dir, write_demo_config
from watcher.cli.exitcodes import ExitCode

if TYPE_CHECKING:
    import argparse

# Invented instruments; the first is the single-instrument demo's.
INSTRUMENTS = ("Kestrel-2 Q-TOF", "Heron-5 QqQ", "Merlin-3 TOF")
RUN_DEADLINE_S = 60.0
# Debian puts the server binaries here (package ``postgresql``); PATH is tried too.
_BIN_DIRS = tuple(Path(f"/usr/lib/postgresql/{v}/bin") for v in (17, 16, 15, 14, 13))


def server_bindir() -> Path | None:
    """The folder of ``initdb`` and ``pg_ctl``, or None when no PostgreSQL server is installed."""
    for d in _BIN_DIRS:
        if (d / "initdb").is_file() and (d / "pg_ctl").is_file():
            return d
    found = shutil.which("pg_ctl")
    if found and (Path(found).parent / "initdb").exists():
        return Path(found).parent
    return None


class DemoServer:
    """A PostgreSQL cluster in ``root`` on a Unix socket there (and no TCP port)."""

    def __init__(self, bindir: Path, root: Path) -> None:
        self.bindir = bindir
        self.root = root
        self.as_postgres = os.geteuid() == 0
        with socket.socket() as s:  # a free number for the socket's name
            s.bind(("127.0.0.1", 0))
            self.port = int(s.getsockname()[1])

    def _run(self, *args: str) -> None:
        cmd = ["runuser", "-u", "postgres", "--", *args] if self.as_postgres else list(args)
        done = subprocess.run(cmd, capture_output=True, text=True, check=False, timeout=120)
        if done.returncode != 0:
            raise RuntimeError(f"{Path(args[0]).name}: {done.stderr.strip() or done.returncode}")

    @property
    def data(self) -> Path:
        return self.root / "data"

    def reachable(self, folder: Path) -> bool:
        """Whether the server's user can reach ``folder`` (root's private folders: no)."""
        if not self.as_postgres:
            return True
        done = subprocess.run(
            ["runuser", "-u", "postgres", "--", "test", "-x", str(folder)],
            capture_output=True,
            check=False,
            timeout=30,
        )
        return done.returncode == 0

    def start_new(self) -> None:
        self.root.mkdir(parents=True, exist_ok=True)
        self.root.chmod(0o755)
        for d in (self.data, self.root / "sock"):
            d.mkdir(mode=0o700)
            if self.as_postgres:
                shutil.chown(d, "postgres", "postgres")
        self._run(
            str(self.bindir / "initdb"), "-D", str(self.data), "-U", "postgres", "-A", "trust",
            "-E", "UTF8", "--locale=C",
        )  # fmt: skip
        conf = self.data / "postgresql.auto.conf"
        conf.write_text(
            f"port = {self.port}\nlisten_addresses = ''\n"
            f"unix_socket_directories = '{self.root / 'sock'}'\n"
        )
        if self.as_postgres:
            shutil.chown(conf, "postgres", "postgres")
        self.start()

    def start(self) -> None:
        log = self.data / "server.log"
        self._run(str(self.bindir / "pg_ctl"), "-D", str(self.data), "-l", str(log), "-w", "start")

    def stop(self) -> None:
        self._run(str(self.bindir / "pg_ctl"), "-D", str(self.data), "-m", "fast", "-w", "stop")

    def url(self, database: str = "postgres") -> str:
        return f"postgresql://postgres@/{database}?host={self.root / 'sock'}&port={self.port}"

    def create_database(self, name: str) -> str:
        import psycopg

        with psycopg.connect(self.url(), autocommit=True) as conn:
            conn.execute(f"CREATE DATABASE {name}")
        return self.url(name)


def _config(folder: Path, name: str, url: str, receiver_url: str) -> Path:
    (folder / "exports").mkdir(parents=True, exist_ok=True)
    path = write_demo_config(folder, [receiver_url], settle_s=0.5)
    data = yaml.safe_load(path.read_text())
    data["instrument"]["name"] = name
    data["central"] = {"url": url, "retry_first_wait": "1s", "retry_max_wait": "5s"}
    path.write_text(
        "# Written by `ionwarden demo --facility`.\n" + yaml.safe_dump(data, sort_keys=False)
    )
    return path


def main(args: argparse.Namespace) -> int:
    bindir = server_bindir()
    if bindir is None:
        print(
            "ionwarden demo --facility needs a PostgreSQL server installed (Debian: apt-get "
            "install postgresql); `ionwarden demo` runs without it",
            file=sys.stderr,
        )
        return ExitCode.RUNTIME
    drop = demo_drop_dir()
    queue = json.loads((drop / "TRUTH.json").read_text())["queue"]
    workdir = (
        Path(args.workdir) if args.workdir else Path(tempfile.mkdtemp(prefix="ionwarden-facility-"))
    )
    workdir.mkdir(parents=True, exist_ok=True)
    server = DemoServer(bindir, workdir / "pg")
    if not server.reachable(workdir):
        # The postgres user cannot enter the work folder (a private one of root's): the
        # cluster gets a folder of its own under the system's temporary folder instead.
        server = DemoServer(bindir, Path(tempfile.mkdtemp(prefix="ionwarden-facility-pg-")))
    print("ionwarden demo --facility: three instruments of the Larkfield Metabolomics Core")
    print(f"  starting a PostgreSQL server for the central store under {server.root}")
    server.start_new()
    try:
        return _run(args, server, queue, drop, workdir)
    finally:
        try:
            server.stop()
        except RuntimeError as exc:  # say so, without hiding why the demo ended
            print(f"could not stop the demo's PostgreSQL server: {exc}", file=sys.stderr)


def _run(
    args: argparse.Namespace,
    server: DemoServer,
    queue: list[dict[str, Any]],
    drop: Path,
    workdir: Path,
) -> int:
    url = server.create_database("facility")
    receiver = _Receiver()
    threading.Thread(target=receiver.serve_forever, name="demo-receiver", daemon=True).start()
    configs = [
        _config(workdir / f"instrument{i}", name, url, receiver.url)
        for i, name in enumerate(INSTRUMENTS)
    ]
    daemons: list[subprocess.Popen[bytes]] = []
    code = 0
    try:
        for i, cfg in enumerate(configs):
            log_file = (workdir / f"instrument{i}" / "daemon.log").open("wb")
            daemons.append(
                subprocess.Popen(
                    [sys.executable, "-m", "watcher", "run", "-c", str(cfg)],
                    stdout=log_file,
                    stderr=subprocess.STDOUT,
                    env={**os.environ, "PYTHONUNBUFFERED": "1"},
                )
            )
        print(f"  {len(daemons)} daemons publish to {url}")
        print()
        code = _feed_all(queue, drop, workdir, daemons)
        if code == 0:
            _wait_published(url, workdir, len(queue))
    finally:
        for d in daemons:
            if d.poll() is None:
                d.send_signal(signal.SIGTERM)
        for d in daemons:
            try:
                d.wait(timeout=20)
            except subprocess.TimeoutExpired:
                d.kill()
                d.wait()
        receiver.shutdown()
    if code == 0:
        from watcher.cli import main as cli_main

        print()
        print(f"$ ionwarden status -c {configs[0]} --all")
        cli_main(["status", "-c", str(configs[0]), "--all"])
    print()
    print(f"central store (stopped now): {url}")
    print(f"  start it again: {_start_hint(server)}")
    print(f"  then: ionwarden status -c {configs[0]} --all   (or --instrument NAME, digest --all)")
    print(f"  the floor page: ionwarden serve -c {configs[0]} --all")
    print(f"    and open {_page_address(configs[0])} (every instrument as a tile)")
    return code


def _page_address(config_path: Path) -> str:
    """Where ``serve`` listens for this config (its ``serve.listen``, by default 127.0.0.1)."""
    from watcher import config as config_mod

    listen = config_mod.load(config_path).serve.listen
    host = f"[{listen.host}]" if ":" in listen.host else listen.host
    return f"http://{host}:{listen.port}/"


def _start_hint(server: DemoServer) -> str:
    cmd = f"{server.bindir / 'pg_ctl'} -D {server.data} -l {server.data / 'server.log'} start"
    return f"runuser -u postgres -- {cmd}" if server.as_postgres else cmd


def _feed_all(
    queue: list[dict[str, Any]], drop: Path, workdir: Path, daemons: list[subprocess.Popen[bytes]]
) -> int:
    """Each run of the queue arrives at every instrument; each verdict is printed."""
    for item in queue:
        name = item["file"]
        acquired_at = datetime.fromisoformat(item["acquired_at"])
        finished = acquired_at + timedelta(seconds=item["duration_s"])
        for i in range(len(daemons)):
            exports = workdir / f"instrument{i}" / "exports"
            exports.mkdir(parents=True, exist_ok=True)
            _arrive(drop / name, exports, finished)
        verdicts = []
        for i, d in enumerate(daemons):
            deadline = time.monotonic() + RUN_DEADLINE_S
            while (status := _judged(workdir / f"instrument{i}" / "state").get(name)) is None:
                if d.poll() is not None or time.monotonic() > deadline:
                    print(f"{INSTRUMENTS[i]}: no verdict for {name}", file=sys.stderr)
                    return ExitCode.RUNTIME
                time.sleep(0.1)
            verdicts.append(f"{INSTRUMENTS[i]} {status.upper()}")
        print(f"{acquired_at:%H:%M}  {name:26s} {', '.join(verdicts)}", flush=True)
    return 0


def _wait_published(url: str, workdir: Path, runs_each: int) -> None:
    """Until the central store holds every instrument's runs (or 30 s passed)."""
    import psycopg

    deadline = time.monotonic() + 30.0
    while time.monotonic() < deadline:
        try:
            with psycopg.connect(url, autocommit=True) as conn:
                row = conn.execute("SELECT count(*) FROM runs").fetchone()
            if row is not None and int(row[0]) >= runs_each * len(INSTRUMENTS):
                return
        except psycopg.Error:
            pass  # the tables appear with the first publish
        time.sleep(0.3)
    print(f"(not every run was published within 30 s; see {workdir}/instrument*/daemon.log)")
