"""The intake stage: watch folders, walk them, settle files and tell complete runs from cut ones.

Entry points are imported on first use (``watcher.entry_point_getattr``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher import entry_point_getattr

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

__getattr__ = entry_point_getattr(__name__, _ENTRY_POINTS)
