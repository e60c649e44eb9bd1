"""A real HTTP receiver on 127.0.0.1 for apprise json:// URLs, and helpers to script verdicts."""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Iterator
from datetime import UTC, datetime
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

import pytest

from tests.helpers.clock import Clock


class Receiver:
    """Records the JSON bodies POSTed to it; can answer 500, hang, or be stopped and restarted."""

    def __init__(self) -> None:
        self.bodies: list[dict[str, Any]] = []
        self.hits = 0
        self.mode = "ok"  # ok | fail | hang
        self._release = threading.Event()
        self._lock = threading.Lock()
        self._server: ThreadingHTTPServer | None = None
        self._thread: threading.Thread | None = None
        self.port = 0
        self.start()

    def start(self) -> None:
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:
                length = int(self.headers.get("Content-Length", "0"))
                raw = self.rfile.read(length)
                with receiver._lock:
                    receiver.hits += 1
                    mode = receiver.mode
                if mode == "hang":
                    receiver._release.wait(10)
                    return
                if mode == "fail":
                    self.send_response(500)
                    self.end_headers()
                    return
                with receiver._lock:
                    receiver.bodies.append(json.loads(raw))
                self.send_response(200)
                self.end_headers()

            def log_message(self, format: str, *args: object) -> None:
                pass

        server = ThreadingHTTPServer(("127.0.0.1", self.port), Handler)
        server.daemon_threads = True
        self.port = server.server_address[1]
        self._server = server
        self._thread = threading.Thread(target=server.serve_forever, daemon=True)
        self._thread.start()

    def stop(self) -> None:
        """Close the socket: later connections are refused."""
        if self._server is not None:
            self._release.set()
            self._server.shutdown()
            self._server.server_close()
            assert self._thread is not None
            self._thread.join(5)
            self._server = None
            self._release = threading.Event()

    def url(self, path: str = "alerts") -> str:
        return f"json://127.0.0.1:{self.port}/{path}"

    def titles(self) -> list[str]:
        with self._lock:
            return [str(b.get("title")) for b in self.bodies]

    def wait_for(self, n: int, timeout_s: float = 10.0) -> list[dict[str, Any]]:
        """Wait until ``n`` bodies arrived (deadline, not a fixed sleep); return them."""
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            with self._lock:
                if len(self.bodies) >= n:
                    return list(self.bodies)
            time.sleep(0.02)
        raise AssertionError(f"expected {n} messages, got {len(self.bodies)}: {self.titles()}")

    def wait_hits(self, n: int, timeout_s: float = 10.0) -> None:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if self.hits >= n:
                return
            time.sleep(0.02)
        raise AssertionError(f"expected {n} requests, got {self.hits}")


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    r = Receiver()
    yield r
    r.stop()


@pytest.fixture(autouse=True)
def _no_leaked_threads() -> Iterator[None]:
    """Fail a test that leaves a delivery worker running (watchdog's conftest does the same)."""
    yield
    deadline = time.monotonic() + 5
    while time.monotonic() < deadline:
        alive = [t for t in threading.enumerate() if t.name == "ionwarden-delivery"]
        if not alive:
            return
        time.sleep(0.05)
    raise AssertionError(f"delivery worker threads leaked: {alive}")


@pytest.fixture
def clock() -> Clock:
    return Clock(datetime(2026, 3, 10, 2, 0, tzinfo=UTC).timestamp())
