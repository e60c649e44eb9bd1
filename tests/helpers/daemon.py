"""The daemon as a real subprocess on real folders: ``Lab`` (one test's folders, config and
observations of the SQLite file and health log) and ``Daemon`` (``ionwarden run``, its output in
a file and an sd_notify socket of the test's own).

Everything waits on observable effects with a deadline (rows in the SQLite file, lines in the
health log, datagrams on a notify socket); nothing sleeps for a fixed time longer than a poll.
"""

from __future__ import annotations

import itertools
import json
import os
import resource
import signal
import socket
import sqlite3
import subprocess
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest

from tests.helpers.cli import cli_env, command
from tests.helpers.wait import wait_for

SETTLE_S = 0.3


def variant(template: bytes, n: int) -> bytes:
    """The template with a comment after the XML declaration: same run, different content."""
    head, _, rest = template.partition(b"?>")
    return head + b"?>\n<!-- copy %d -->" % n + rest


@dataclass
class Lab:
    """One test's folders and config; ``start()`` runs the daemon on them."""

    root: Path
    exports: Path
    state: Path
    config: Path
    template: bytes
    procs: list[Daemon] = field(default_factory=list)

    def write_config(self, **overrides: Any) -> None:
        watch = {"folders": [str(self.exports)], "settle_s": SETTLE_S, "rescan_interval_s": 600}
        watch.update(overrides.pop("watch", {}))
        cfg: dict[str, Any] = {
            "instrument": {"name": "Kestrel-2 Q-TOF", "timezone": "UTC"},
            "watch": watch,
            "state_dir": str(self.state),
            "calibrants": [{"name": "siloxane-445", "mz": 445.120025, "search_ppm": 30}],
            "checks": [
                {
                    "name": "calibration drift",
                    "metric": "calibrant.*.median_ppm",
                    "warning": {"outside": [-3, 3]},
                }
            ],
        }
        cfg.update(overrides)
        # JSON is YAML: no dumper needed, and no ambiguity in how values are written.
        self.config.write_text(json.dumps(cfg, indent=1))

    def run_bytes(self, n: int) -> bytes:
        return variant(self.template, n)

    def drop(self, name: str, n: int) -> Path:
        path = self.exports / name
        path.write_bytes(self.run_bytes(n))
        return path

    def start(
        self,
        *,
        env: dict[str, str] | None = None,
        ready: bool = True,
        file_size_limit: int | None = None,
        options: tuple[str, ...] = (),
    ) -> Daemon:
        """Run the daemon; ``file_size_limit`` (bytes) starts it under that RLIMIT_FSIZE, 0
        making every write to a regular file fail as on a full disk (``set_file_size_limit``);
        ``options`` go before the command (``("-v",)``)."""
        d = Daemon(self, env or {}, file_size_limit, options)
        self.procs.append(d)
        if ready:
            d.wait_ready()
        return d

    # -- observations --------------------------------------------------------------------------

    def _query(self, sql: str, args: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
        db = self.state / "ionwarden.sqlite3"
        if not db.exists():
            return []
        conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=10)
        try:
            return conn.execute(sql, args).fetchall()
        except sqlite3.OperationalError:
            return []  # tables not created yet
        finally:
            conn.close()

    def runs(self) -> list[tuple[str, str, str | None]]:
        """(file name, status, error) of every row in the run history."""
        rows = self._query("SELECT file_name, status, error FROM runs")
        return [(_name(r[0]), r[1], r[2]) for r in rows]

    def runs_by_name(self) -> dict[str, int]:
        out: dict[str, int] = {}
        for name, _, _ in self.runs():
            out[name] = out.get(name, 0) + 1
        return out

    def jobs(self) -> list[tuple[str, str, str | None]]:
        rows = self._query("SELECT path, state, outcome FROM jobs ORDER BY id")
        return [(Path(_name(r[0])).name, r[1], r[2]) for r in rows]

    def attempts(self, name: str) -> int:
        """How often the job of the file called ``name`` was claimed for measuring."""
        rows = self._query("SELECT path, attempts FROM jobs")
        return sum(r[1] for r in rows if Path(_name(r[0])).name == name)

    def health(self) -> list[dict[str, Any]]:
        out = []
        for path in sorted((self.state / "health").glob("health-*.jsonl")):
            out += [json.loads(line) for line in path.read_text().splitlines() if line.strip()]
        return out

    def health_runs(self) -> list[dict[str, Any]]:
        return [r for r in self.health() if r.get("type") == "run"]

    def wait_runs(self, n: int, timeout_s: float = 20.0) -> list[tuple[str, str, str | None]]:
        wait_for(lambda: len(self.runs()) >= n, timeout_s, f"{n} judged runs")
        return self.runs()


class Daemon:
    """``python -m watcher run -c CONFIG`` with stderr in a file and a notify socket of our own."""

    def __init__(
        self,
        lab: Lab,
        extra_env: dict[str, str],
        file_size_limit: int | None = None,
        options: tuple[str, ...] = (),
    ) -> None:
        self.lab = lab
        index = len(lab.procs)
        self.log_path = lab.root / f"daemon{index}.stderr"
        self.sock_path = lab.root / f"notify{index}.sock"
        self.sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
        self.sock.bind(str(self.sock_path))
        self.sock.setblocking(False)
        self.messages: list[str] = []
        self.received_s: list[float] = []  # time.monotonic() when each message was picked up
        # PYTHONFAULTHANDLER: a hung daemon dumps its threads on SIGABRT (see ``stop``).
        env = cli_env(
            set_env={"NOTIFY_SOCKET": str(self.sock_path), "PYTHONFAULTHANDLER": "1", **extra_env}
        )
        self._log = self.log_path.open("wb")
        self.proc = subprocess.Popen(
            command(*options, "run", "-c", lab.config),
            cwd=lab.root,
            env=env,
            stdout=self._log,
            stderr=subprocess.STDOUT,
            preexec_fn=None
            if file_size_limit is None
            else lambda: set_file_size_limit(os.getpid(), file_size_limit),
        )

    def notes(self) -> list[str]:
        """Every sd_notify datagram received so far."""
        while True:
            try:
                self.messages.append(self.sock.recv(4096).decode())
                self.received_s.append(time.monotonic())
            except BlockingIOError:
                return self.messages

    def watchdog_gaps_s(self) -> list[float]:
        """Seconds between consecutive WATCHDOG=1 pings, as picked up by ``notes`` (call it
        often: a ping is stamped when it is read, not when it was sent)."""
        self.notes()
        stamped = zip(self.received_s, self.messages, strict=True)
        times = [t for t, m in stamped if m == "WATCHDOG=1"]
        return [b - a for a, b in itertools.pairwise(times)]

    def stderr(self) -> str:
        return self.log_path.read_text(errors="replace")

    def events(self) -> list[dict[str, Any]]:
        out = []
        for line in self.stderr().splitlines():
            if line.startswith("{"):
                try:
                    out.append(json.loads(line))
                except json.JSONDecodeError:
                    continue  # a line cut by kill -9
        return out

    def wait_ready(self, timeout_s: float = 20.0) -> None:
        def ready() -> bool:
            if self.proc.poll() is not None:
                pytest.fail(f"daemon exited {self.proc.returncode}:\n{self.stderr()[-3000:]}")
            return "READY=1" in self.notes()

        wait_for(ready, timeout_s, "READY=1 from the daemon")

    def signal(self, sig: int) -> None:
        self.proc.send_signal(sig)

    def child_reading(self, file_name: str) -> int | None:
        """The pid of the daemon's child process that has ``file_name`` open (the measuring
        child while it measures that run), from /proc; None when there is none right now."""
        for entry in os.listdir("/proc"):
            if not entry.isdigit():
                continue
            try:
                stat = Path(f"/proc/{entry}/stat").read_text()
                ppid = int(stat.rsplit(")", 1)[1].split()[1])
                if ppid != self.proc.pid:
                    continue
                fds = os.listdir(f"/proc/{entry}/fd")
                targets = [os.readlink(f"/proc/{entry}/fd/{fd}") for fd in fds]
            except (OSError, IndexError, ValueError):
                continue  # gone meanwhile, or not ours to look at
            if any(Path(t).name == file_name for t in targets):
                return int(entry)
        return None

    def stop(self, timeout_s: float = 10.0) -> int:
        """SIGTERM and wait; returns the exit code."""
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
        try:
            return self.proc.wait(timeout=timeout_s)
        except subprocess.TimeoutExpired:
            self.proc.send_signal(signal.SIGABRT)  # thread dump into the log, then gone
            try:
                self.proc.wait(timeout=5)
            except subprocess.TimeoutExpired:
                self.proc.kill()
            pytest.fail(f"daemon did not stop within {timeout_s} s:\n{self.stderr()[-3000:]}")

    def kill9(self) -> None:
        self.proc.kill()
        self.proc.wait(timeout=10)

    def close(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait(timeout=10)
        self._log.close()
        self.sock.close()


def set_file_size_limit(pid: int, limit_bytes: int) -> None:
    """RLIMIT_FSIZE of a process (prlimit(2)): at 0 every write to a regular file fails with
    EFBIG, as on a full disk, while sockets (sd_notify, HTTP) still work; the hard limit stays
    unlimited, so ``resource.RLIM_INFINITY`` lifts it again."""
    resource.prlimit(pid, resource.RLIMIT_FSIZE, (limit_bytes, resource.RLIM_INFINITY))


def _name(value: str | bytes) -> str:
    """A stored path or name as Python names it: names that are not UTF-8 are stored as bytes."""
    return os.fsdecode(value) if isinstance(value, bytes) else value


def write_lab_config(root: Path, **overrides: Any) -> Path:
    """For the in-process daemon: a JSON (hence YAML) config watching ``root/exports``, with
    its state in ``root/state``."""
    (root / "exports").mkdir(exist_ok=True)
    cfg: dict[str, Any] = {
        "instrument": {"name": "Kestrel-2 Q-TOF", "timezone": "UTC"},
        "watch": {"folders": [str(root / "exports")], "settle_s": 0.2, "rescan_interval_s": 600},
        "state_dir": str(root / "state"),
        "calibrants": [{"name": "siloxane-445", "mz": 445.120025, "search_ppm": 30}],
        "checks": [
            {
                "name": "calibration drift",
                "metric": "calibrant.*.median_ppm",
                "warning": {"outside": [-3, 3]},
            }
        ],
    }
    cfg.update(overrides)
    path = root / "lab.yaml"
    path.write_text(json.dumps(cfg, indent=1))
    return path


def run_lines(health_dir: Path) -> list[str]:
    """The raw text of every run record in the health log, oldest file first."""
    out: list[str] = []
    for path in sorted(health_dir.glob("health-*.jsonl")):
        out += [line for line in path.read_text().splitlines() if '"type": "run"' in line]
    return out
