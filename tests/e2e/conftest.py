"""End-to-end fixtures: real run files and a ``Lab`` per test (tests/helpers/daemon.py), whose
daemons are killed after the test if still running; the receiver fixture is in tests/conftest.py.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import pytest

import synth
from tests.helpers.daemon import Lab

if TYPE_CHECKING:
    from collections.abc import Iterator
    from pathlib import Path


@pytest.fixture(scope="session")
def tiny_template(tmp_path_factory: pytest.TempPathFactory) -> bytes:
    """A small valid, non-indexed mzML (from the project's synthetic generator)."""
    path = tmp_path_factory.mktemp("template") / "tiny.mzML"
    spec = synth.RunSpec(duration_s=10, ms2_per_cycle=0, background_peaks=20, seed=7)
    synth.write_mzml(path, spec, indexed=False)
    return path.read_bytes()


@pytest.fixture(scope="session")
def big_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A 60-min synthetic run (about 52 MB, about a second to measure): for kills and limits."""
    path = tmp_path_factory.mktemp("big") / "big.mzML"
    synth.write_mzml(path, synth.RunSpec(duration_s=3600, ms2_per_cycle=3, seed=4), indexed=False)
    return path


@pytest.fixture
def lab(tmp_path: Path, tiny_template: bytes) -> Iterator[Lab]:
    exports = tmp_path / "exports"
    exports.mkdir()
    the_lab = Lab(
        root=tmp_path,
        exports=exports,
        state=tmp_path / "state",
        config=tmp_path / "lab.yaml",
        template=tiny_template,
    )
    the_lab.write_config()
    yield the_lab
    for d in the_lab.procs:
        d.close()
