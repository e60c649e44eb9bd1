"""Where the shared reference data (open-standard example files, published tables) live.

The project's checkout sits beside ``shared/`` (``../shared/reference``), in development and in
CI alike; ``IONWARDEN_REFERENCE`` overrides it.
"""

from __future__ import annotations

import os
from pathlib import Path

_REPO = Path(__file__).resolve().parents[1]


def _find() -> Path:
    candidates = [
        Path(os.environ["IONWARDEN_REFERENCE"]) if os.environ.get("IONWARDEN_REFERENCE") else None,
        _REPO.parent / "shared" / "reference",
        Path("/work/shared/reference"),
    ]
    for candidate in candidates:
        if candidate is not None and (candidate / "README.md").is_file():
            return candidate
    raise RuntimeError("shared/reference not found beside the checkout; set IONWARDEN_REFERENCE")


REFERENCE: Path = _find()
