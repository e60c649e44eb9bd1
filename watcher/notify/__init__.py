"""The notify stage: alert states, messages, delivery, the health log and the digest.

Entry points are imported on first use (``watcher.entry_point_getattr``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher import entry_point_getattr

if TYPE_CHECKING:
    from watcher.notify.digest import build_digest
    from watcher.notify.notifier import Notifier

_ENTRY_POINTS = {
    "Notifier": "watcher.notify.notifier",
    "build_digest": "watcher.notify.digest",
}

__all__ = ["Notifier", "build_digest"]

__getattr__ = entry_point_getattr(__name__, _ENTRY_POINTS)
