"""The intake stage: watch folders, walk them, settle files and tell complete runs from cut ones.

Entry points are imported on first use (PEP 562), so that importing one small module of this
package does not pay for the heavy ones (numpy, lxml, apprise, matplotlib).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from watcher.intake.formats import completeness, sniff
    from watcher.intake.pending import Settled, Settler
    from watcher.intake.watch import start_watching, stop_watching

_ENTRY_POINTS = {
    "Settled": "watcher.intake.pending",
    "Settler": "watcher.intake.pending",
    "completeness": "watcher.intake.formats",
    "sniff": "watcher.intake.formats",
    "start_watching": "watcher.intake.watch",
    "stop_watching": "watcher.intake.watch",
}

__all__ = ["Settled", "Settler", "completeness", "sniff", "start_watching", "stop_watching"]


def __getattr__(name: str) -> Any:
    if name in _ENTRY_POINTS:
        return getattr(importlib.import_module(_ENTRY_POINTS[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
