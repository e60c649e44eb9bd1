"""Headless Chromium (Debian's package) for tests that look at a page the way a person would."""

from __future__ import annotations

import shutil
import subprocess
from typing import TYPE_CHECKING

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
