"""Where the tests' reference data live: ``tests/data/`` (open-standard example files and
published tables, each file's origin and licence in ``tests/data/README.md``)."""

from __future__ import annotations

from pathlib import Path

REFERENCE: Path = Path(__file__).resolve().parents[1] / "data"
