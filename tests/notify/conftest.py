"""Notify fixtures: a controllable clock, and no delivery worker left running after a test."""

from __future__ import annotations

import threading
import time
from datetime import UTC, datetime
from typing import TYPE_CHECKING

import pytest

from tests.helpers.clock import Clock

if TYPE_CHECKING:
    from collections.abc import Iterator


@pytest.fixture(autouse=True)
def _no_leaked_threads() -> Iterator[None]:
    """Fail a test that leaves a delivery worker running (watchdog's conftest does the same)."""
    yield
    deadline = time.monotonic() + 5
    while time.monotonic() < deadline:
        alive = [t for t in threading.enumerate() if t.name == "ionwarden-delivery"]
        if not alive:
            return
        time.sleep(0.05)
    raise AssertionError(f"delivery worker threads leaked: {alive}")


@pytest.fixture
def clock() -> Clock:
    return Clock(datetime(2026, 3, 10, 2, 0, tzinfo=UTC).timestamp())
