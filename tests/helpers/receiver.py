"""A real HTTP receiver on 127.0.0.1 for apprise ``json://`` URLs, with switchable failures.

``mode`` sets the answer to each POST: ``ok`` (200, body recorded), ``fail`` (500, nothing
recorded) or ``hang`` (no answer until ``stop()`` or 10 s, so the client's read timeout ends it).
``stop()`` closes the port (connection refused) and ``start()`` opens it again on the same port,
so a configured URL stays valid (apprise's own ``tests/helpers/rest.py`` fails the same ways).
Waits are deadlines on what arrived, never fixed sleeps.
"""

from __future__ import annotations

import json
import threading
import time
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

HANG_S = 10.0  # longest a ``hang`` answer holds a request


class Receiver:
    """Records the JSON bodies it answered 200 (``bodies``), every request's JSON whatever the
    answer (``requests``: a hung request still carried a message), and counts them (``hits``)."""

    def __init__(self) -> None:
        self.bodies: list[dict[str, Any]] = []
        self.paths: list[str] = []  # the URL path each of ``bodies`` was posted to
        self.requests: list[dict[str, Any]] = []
        self.hits = 0
        self.mode = "ok"  # ok | fail | hang
        self._release = threading.Event()
        self._lock = threading.Lock()
        self._server: ThreadingHTTPServer | None = None
        self._thread: threading.Thread | None = None
        self.port = 0
        self.start()

    def start(self) -> None:
        """Listen (again) on 127.0.0.1: a free port the first time, the same port after."""
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:
                length = int(self.headers.get("Content-Length", "0"))
                raw = self.rfile.read(length)
                try:
                    body = json.loads(raw)
                except json.JSONDecodeError:
                    body = {"raw": raw.decode(errors="replace")}
                with receiver._lock:
                    receiver.hits += 1
                    receiver.requests.append(body)
                    mode = receiver.mode
                if mode == "hang":
                    receiver._release.wait(HANG_S)
                    return  # no answer
                if mode == "fail":
                    self.send_response(500)
                    self.end_headers()
                    return
                with receiver._lock:
                    receiver.bodies.append(body)
                    receiver.paths.append(self.path)
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
        """Close the socket: later connections are refused; hanging requests are let go."""
        if self._server is not None:
            self._release.set()
            self._server.shutdown()
            self._server.server_close()
            assert self._thread is not None
            self._thread.join(5)
            self._server = None
            self._release = threading.Event()

    def url(self, path: str = "alerts", *, auth: str = "") -> str:
        """The apprise URL of this receiver; ``auth`` is ``"user:password@"`` or empty."""
        return f"json://{auth}127.0.0.1:{self.port}/{path}"

    def by_path(self) -> dict[str, list[dict[str, Any]]]:
        """The recorded bodies by the URL path they came to (``/chat``): one per channel."""
        out: dict[str, list[dict[str, Any]]] = {}
        with self._lock:
            for path, body in zip(self.paths, self.bodies, strict=True):
                out.setdefault(path, []).append(body)
        return out

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
        """Wait until ``n`` requests arrived, answered or not."""
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if self.hits >= n:
                return
            time.sleep(0.02)
        raise AssertionError(f"expected {n} requests, got {self.hits}")
