"""Readers of the open formats (mzML, indexed mzML, mzXML, MGF), streaming spectra.

Entry points are imported on first use (``watcher.entry_point_getattr``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher import entry_point_getattr

if TYPE_CHECKING:
    from watcher.measure.readers.read import open_run

_ENTRY_POINTS = {
    "open_run": "watcher.measure.readers.read",
}

__all__ = ["open_run"]

__getattr__ = entry_point_getattr(__name__, _ENTRY_POINTS)
