"""The measure stage: read a run file and compute its metrics (pure functions over arrays).

Entry points are imported on first use (PEP 562), so that importing one small module of this
package does not pay for the heavy ones (numpy, lxml, apprise, matplotlib).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from watcher.measure.run import measure_file, measure_scans

_ENTRY_POINTS = {
    "measure_file": "watcher.measure.run",
    "measure_scans": "watcher.measure.run",
}

__all__ = ["measure_file", "measure_scans"]


def __getattr__(name: str) -> Any:
    if name in _ENTRY_POINTS:
        return getattr(importlib.import_module(_ENTRY_POINTS[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
