"""The notify stage: alert states, messages, delivery, the health log and the digest.

Entry points are imported on first use (PEP 562), so that importing one small module of this
package does not pay for the heavy ones (numpy, lxml, apprise, matplotlib).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from watcher.notify.digest import build_digest
    from watcher.notify.notifier import Notifier

_ENTRY_POINTS = {
    "Notifier": "watcher.notify.notifier",
    "build_digest": "watcher.notify.digest",
}

__all__ = ["Notifier", "build_digest"]


def __getattr__(name: str) -> Any:
    if name in _ENTRY_POINTS:
        return getattr(importlib.import_module(_ENTRY_POINTS[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
