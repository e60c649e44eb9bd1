"""Headless Chromium (Debian's package) for tests that look at a page the way a person would."""

from __future__ import annotations

import base64
import contextlib
import json
import os
import select
import shutil
import subprocess
import time
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from pathlib import Path

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")

# No network chatter on a machine without network; logging on stderr shows console errors.
FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--enable-logging=stderr",
    "--v=0",
)


def dump_dom(
    page: Path, profile: Path, *, size: str | None = None
) -> subprocess.CompletedProcess[str]:
    """The page's DOM after rendering (stdout) and Chromium's log (stderr), at ``size`` px."""
    assert CHROMIUM is not None
    window = [f"--window-size={size}"] if size else []
    return subprocess.run(
        [CHROMIUM, *FLAGS, *window, f"--user-data-dir={profile}", "--dump-dom", page.as_uri()],
        capture_output=True,
        text=True,
        timeout=60,
        check=True,
    )


def screenshot(page: Path, shot: Path, profile: Path, *, size: str = "1100,2400") -> bytes:
    """A PNG of the rendered page, written to ``shot``; returns its bytes."""
    assert CHROMIUM is not None
    subprocess.run(
        [
            CHROMIUM,
            *FLAGS,
            f"--user-data-dir={profile}",
            f"--screenshot={shot}",
            f"--window-size={size}",
            page.as_uri(),
        ],
        capture_output=True,
        timeout=60,
        check=True,
    )
    return shot.read_bytes()


class LivePage:
    """A page kept open in headless Chromium and read while it runs, through the DevTools
    protocol over ``--remote-debugging-pipe`` (fd 3: commands in, fd 4: replies out, each JSON
    message ended by a NUL byte; https://chromedevtools.github.io/devtools-protocol/).

    For what a one-shot ``--dump-dom`` cannot show: a page that changes by itself after loading
    (the floor page's refresh). ``evaluate`` runs an expression in the page, ``screenshot`` takes
    a PNG at a given width. Use as a context manager; the browser is killed on exit.
    """

    def __init__(self, url: str, profile: Path, *, size: str = "1280,900") -> None:
        assert CHROMIUM is not None
        self._cmd_r, self._cmd_w = os.pipe()
        self._out_r, self._out_w = os.pipe()

        def child_fds() -> None:
            # dup first: a pipe end may already be fd 3 or 4, and dup2 onto itself would keep
            # its close-on-exec flag.
            read_end, write_end = os.dup(self._cmd_r), os.dup(self._out_w)
            os.dup2(read_end, 3)
            os.dup2(write_end, 4)

        self.proc = subprocess.Popen(
            [
                CHROMIUM,
                *FLAGS,
                "--remote-debugging-pipe",
                f"--user-data-dir={profile}",
                f"--window-size={size}",
                url,
            ],
            preexec_fn=child_fds,
            close_fds=False,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        os.close(self._cmd_r)
        os.close(self._out_w)
        self._buffer = b""
        self._next_id = 0
        self.session = self._attach()

    def __enter__(self) -> LivePage:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait(timeout=10)
        for fd in (self._cmd_w, self._out_r):
            with contextlib.suppress(OSError):
                os.close(fd)

    def call(
        self, method: str, params: dict[str, Any] | None = None, *, timeout_s: float = 20.0
    ) -> dict[str, Any]:
        """One protocol command; returns its ``result`` (raises on an error reply)."""
        self._next_id += 1
        ident = self._next_id
        message: dict[str, Any] = {"id": ident, "method": method, "params": params or {}}
        if getattr(self, "session", None):
            message["sessionId"] = self.session
        os.write(self._cmd_w, json.dumps(message).encode() + b"\0")
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            while b"\0" in self._buffer:
                raw, _, self._buffer = self._buffer.partition(b"\0")
                reply = json.loads(raw)
                if reply.get("id") == ident:
                    if "error" in reply:
                        raise RuntimeError(f"{method}: {reply['error']}")
                    return dict(reply.get("result", {}))
            ready, _, _ = select.select([self._out_r], [], [], 0.2)
            if ready:
                chunk = os.read(self._out_r, 1 << 16)
                if not chunk:
                    raise RuntimeError("chromium closed the debugging pipe")
                self._buffer += chunk
        raise TimeoutError(f"no reply to {method} within {timeout_s} s")

    def _attach(self) -> str:
        self.session = ""
        deadline = time.monotonic() + 20.0
        while time.monotonic() < deadline:
            targets = self.call("Target.getTargets")["targetInfos"]
            pages = [t for t in targets if t["type"] == "page"]
            if pages:
                reply = self.call(
                    "Target.attachToTarget", {"targetId": pages[0]["targetId"], "flatten": True}
                )
                return str(reply["sessionId"])
            time.sleep(0.1)
        raise TimeoutError("chromium opened no page")

    def evaluate(self, expression: str) -> Any:
        """The value of a JavaScript expression in the page (JSON-serialisable results)."""
        reply = self.call("Runtime.evaluate", {"expression": expression, "returnByValue": True})
        if "exceptionDetails" in reply:
            raise RuntimeError(f"{expression}: {reply['exceptionDetails']}")
        return reply["result"].get("value")

    def screenshot(self, shot: Path, *, width: int, height: int = 900) -> bytes:
        """A PNG of the whole page laid out ``width`` CSS px wide (a phone: 390)."""
        self.call(
            "Emulation.setDeviceMetricsOverride",
            {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": width < 600},
        )
        full = self.evaluate("document.documentElement.scrollHeight")
        self.call(
            "Emulation.setDeviceMetricsOverride",
            {"width": width, "height": int(full), "deviceScaleFactor": 1, "mobile": width < 600},
        )
        data = base64.b64decode(self.call("Page.captureScreenshot", {"format": "png"})["data"])
        shot.write_bytes(data)
        return data
