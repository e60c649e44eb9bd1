"""Central-store fixtures: a PostgreSQL cluster per test module (``pg``), started and removed by
the tests themselves (tests/helpers/postgres.py), and a fresh database per test (``facility``)."""

from __future__ import annotations

from typing import TYPE_CHECKING

import pytest

from tests.helpers.postgres import Postgres, make_cluster

if TYPE_CHECKING:
    from collections.abc import Iterator


@pytest.fixture(scope="module")
def pg() -> Iterator[Postgres]:
    cluster = make_cluster()
    yield cluster
    cluster.close()


@pytest.fixture
def facility(pg: Postgres) -> str:
    """The URL of a new, empty database on ``pg`` (Unix socket, no password)."""
    if pg.postmaster_pid() is None:  # a test before this one stopped the server
        pg.start()
    return pg.url(pg.new_database())
