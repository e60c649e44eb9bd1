"""The daemon: the main loop, the pipeline for one run, the measuring child, systemd notify.

Entry points are imported on first use (``watcher.entry_point_getattr``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher import entry_point_getattr

if TYPE_CHECKING:
    from watcher.daemon.main import Daemon, main
    from watcher.daemon.pipeline import Pipeline

_ENTRY_POINTS = {
    "Daemon": "watcher.daemon.main",
    "Pipeline": "watcher.daemon.pipeline",
    "main": "watcher.daemon.main",
}

__all__ = ["Daemon", "Pipeline", "main"]

__getattr__ = entry_point_getattr(__name__, _ENTRY_POINTS)
