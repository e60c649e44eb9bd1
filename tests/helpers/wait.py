"""Waiting on an observable effect with a deadline, never a fixed sleep longer than a poll."""

from __future__ import annotations

import time
from typing import TYPE_CHECKING, Any

import pytest

if TYPE_CHECKING:
    from collections.abc import Callable


def wait_for(
    predicate: Callable[[], Any], timeout_s: float, what: str, poll_s: float = 0.05
) -> Any:
    """Poll ``predicate`` until it returns something truthy; fail naming ``what`` at deadline."""
    end = time.monotonic() + timeout_s
    while True:
        value = predicate()
        if value:
            return value
        if time.monotonic() >= end:
            pytest.fail(f"timed out after {timeout_s} s waiting for {what}")
        time.sleep(poll_s)
