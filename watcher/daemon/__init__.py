"""The daemon: the main loop, the pipeline for one run, the measuring child, systemd notify.

Entry points are imported on first use (PEP 562), so that importing one small module of this
package does not pay for the heavy ones (numpy, lxml, apprise, matplotlib).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from watcher.daemon.main import Daemon, main
    from watcher.daemon.pipeline import Pipeline

_ENTRY_POINTS = {
    "Daemon": "watcher.daemon.main",
    "Pipeline": "watcher.daemon.pipeline",
    "main": "watcher.daemon.main",
}

__all__ = ["Daemon", "Pipeline", "main"]


def __getattr__(name: str) -> Any:
    if name in _ENTRY_POINTS:
        return getattr(importlib.import_module(_ENTRY_POINTS[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
