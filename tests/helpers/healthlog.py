"""Reading the health log back as a lab manager's script would: one JSON record per line."""

from __future__ import annotations

import json
from typing import TYPE_CHECKING, Any

from watcher.notify.healthlog import file_name

if TYPE_CHECKING:
    from datetime import date
    from pathlib import Path


def read_day(directory: Path, day: date) -> list[dict[str, Any]]:
    """Every whole record of one day's file (a line cut off by a kill is skipped)."""
    path = directory / file_name(day)
    if not path.exists():
        return []
    out: list[dict[str, Any]] = []
    for line in path.read_text(encoding="utf-8").splitlines():
        try:
            out.append(json.loads(line))
        except json.JSONDecodeError:
            continue
    return out
