"""The rules stage: a run's metrics and history, judged by the lab's checks into findings.

Entry points are imported on first use (PEP 562), so that importing one small module of this
package does not pay for the heavy ones (numpy, lxml, apprise, matplotlib).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from watcher.rules.judge import History, judge

_ENTRY_POINTS = {
    "History": "watcher.rules.judge",
    "judge": "watcher.rules.judge",
}

__all__ = ["History", "judge"]


def __getattr__(name: str) -> Any:
    if name in _ENTRY_POINTS:
        return getattr(importlib.import_module(_ENTRY_POINTS[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
