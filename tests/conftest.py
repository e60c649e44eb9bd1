"""Fixtures every test package may use; the helpers behind them live in tests/helpers/."""

from __future__ import annotations

from collections.abc import Iterator

import pytest

from tests.helpers.receiver import Receiver


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    """A real HTTP receiver on 127.0.0.1 (apprise json://), closed after the test."""
    r = Receiver()
    yield r
    r.stop()
