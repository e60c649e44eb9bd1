"""Fixtures every test package may use; the helpers behind them live in tests/helpers/."""

from __future__ import annotations

from typing import TYPE_CHECKING

import pytest

from tests.helpers.receiver import Receiver

if TYPE_CHECKING:
    from collections.abc import Iterator


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    """A real HTTP receiver on 127.0.0.1 (apprise json://), closed after the test."""
    r = Receiver()
    yield r
    r.stop()
