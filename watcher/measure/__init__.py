"""The measure stage: read a run file and compute its metrics (pure functions over arrays).

Entry points are imported on first use (``watcher.entry_point_getattr``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher import entry_point_getattr

if TYPE_CHECKING:
    from watcher.measure.run import measure_file, measure_scans

_ENTRY_POINTS = {
    "measure_file": "watcher.measure.run",
    "measure_or_failure": "watcher.measure.run",
    "measure_scans": "watcher.measure.run",
}

__all__ = ["measure_file", "measure_or_failure", "measure_scans"]

__getattr__ = entry_point_getattr(__name__, _ENTRY_POINTS)
