"""Readers of the open formats (mzML, indexed mzML, mzXML, MGF), streaming spectra.

Entry points are imported on first use (PEP 562), so that importing one small module of this
package does not pay for the heavy ones (numpy, lxml, apprise, matplotlib).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from watcher.measure.readers.read import open_run

_ENTRY_POINTS = {
    "open_run": "watcher.measure.readers.read",
}

__all__ = ["open_run"]


def __getattr__(name: str) -> Any:
    if name in _ENTRY_POINTS:
        return getattr(importlib.import_module(_ENTRY_POINTS[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
