"""The rules stage: a run's metrics and history, judged by the lab's checks into findings.

Entry points are imported on first use (``watcher.entry_point_getattr``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher import entry_point_getattr

if TYPE_CHECKING:
    from watcher.rules.judge import History, judge

_ENTRY_POINTS = {
    "History": "watcher.rules.judge",
    "judge": "watcher.rules.judge",
}

__all__ = ["History", "judge"]

__getattr__ = entry_point_getattr(__name__, _ENTRY_POINTS)
