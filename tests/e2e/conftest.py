"""End-to-end fixtures: the daemon as a real subprocess, real run files, a real HTTP receiver.

Everything waits on observable effects with a deadline (rows in the SQLite file, lines in the
health log, datagrams on a notify socket); nothing sleeps for a fixed time longer than a poll.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import sqlite3
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest

import synth

REPO = Path(__file__).resolve().parents[2]
SETTLE_S = 0.3


def wait_for(
    predicate: Callable[[], Any], timeout_s: float, what: str, poll_s: float = 0.05
) -> Any:
    """Poll ``predicate`` until it returns something truthy; fail naming ``what`` at deadline."""
    end = time.monotonic() + timeout_s
    while True:
        value = predicate()
        if value:
            return value
        if time.monotonic() >= end:
            pytest.fail(f"timed out after {timeout_s} s waiting for {what}")
        time.sleep(poll_s)


@pytest.fixture(scope="session")
def tiny_template(tmp_path_factory: pytest.TempPathFactory) -> bytes:
    """A small valid, non-indexed mzML (from the project's synthetic generator)."""
    path = tmp_path_factory.mktemp("template") / "tiny.mzML"
    spec = synth.RunSpec(duration_s=10, ms2_per_cycle=0, background_peaks=20, seed=7)
    synth.write_mzml(path, spec, indexed=False)
    return path.read_bytes()


@pytest.fixture(scope="session")
def big_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A 60-min synthetic run (about 52 MB, about a second to measure): for kills and limits."""
    path = tmp_path_factory.mktemp("big") / "big.mzML"
    synth.write_mzml(path, synth.RunSpec(duration_s=3600, ms2_per_cycle=3, seed=4), indexed=False)
    return path


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

    def start(self, *, env: dict[str, str] | None = None, ready: bool = True) -> Daemon:
        d = Daemon(self, env or {})
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
        return [
            (r[0], r[1], r[2]) for r in self._query("SELECT file_name, status, error FROM runs")
        ]

    def runs_by_name(self) -> dict[str, int]:
        out: dict[str, int] = {}
        for name, _, _ in self.runs():
            out[name] = out.get(name, 0) + 1
        return out

    def jobs(self) -> list[tuple[str, str, str | None]]:
        rows = self._query("SELECT path, state, outcome FROM jobs ORDER BY id")
        return [(Path(r[0]).name, r[1], r[2]) for r in rows]

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

    def __init__(self, lab: Lab, extra_env: dict[str, str]) -> None:
        self.lab = lab
        index = len(lab.procs)
        self.log_path = lab.root / f"daemon{index}.stderr"
        self.sock_path = lab.root / f"notify{index}.sock"
        self.sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
        self.sock.bind(str(self.sock_path))
        self.sock.setblocking(False)
        self.messages: list[str] = []
        env = dict(os.environ)
        # PYTHONFAULTHANDLER: a hung daemon dumps its threads on SIGABRT (see ``stop``).
        env.update(NOTIFY_SOCKET=str(self.sock_path), PYTHONPATH=str(REPO), PYTHONFAULTHANDLER="1")
        env.update(extra_env)
        self._log = self.log_path.open("wb")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "watcher", "run", "-c", str(lab.config)],
            cwd=lab.root,
            env=env,
            stdout=self._log,
            stderr=subprocess.STDOUT,
        )

    def notes(self) -> list[str]:
        """Every sd_notify datagram received so far."""
        while True:
            try:
                self.messages.append(self.sock.recv(4096).decode())
            except BlockingIOError:
                return self.messages

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


@pytest.fixture
def lab(tmp_path: Path, tiny_template: bytes) -> Iterator[Lab]:
    exports = tmp_path / "exports"
    exports.mkdir()
    the_lab = Lab(
        root=tmp_path,
        exports=exports,
        state=tmp_path / "state",
        config=tmp_path / "lab.yaml",
        template=tiny_template,
    )
    the_lab.write_config()
    yield the_lab
    for d in the_lab.procs:
        d.close()
