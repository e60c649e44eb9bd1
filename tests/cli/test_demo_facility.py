"""``ionwarden demo --facility``: three daemons publish the bundled evening into a throwaway
PostgreSQL server, and ``status --all`` from it shows each instrument with every run."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from tests.helpers.cli import REPO, run_cli
from tests.helpers.postgres import require_bindir


@pytest.mark.slow
def test_demo_facility_publishes_three_instruments(tmp_path: Path) -> None:
    require_bindir()  # skips without a server; fails under CI
    work = tmp_path / "work"
    result = run_cli("demo", "--facility", "--workdir", work, timeout=280)
    assert result.returncode == 0, result.stderr[-3000:]
    # demo_drop/TRUTH.json is the queue every instrument receives
    runs = len(json.loads((REPO / "demo_drop" / "TRUTH.json").read_text())["queue"])
    for name in ("Kestrel-2 Q-TOF", "Heron-5 QqQ", "Merlin-3 TOF"):
        assert f"{name}: " in result.stdout
        assert f"({runs} runs;" in result.stdout.split(f"\n{name}: ")[1].splitlines()[0]
    assert "3 instrument(s)" in result.stdout
    # and the floor page's address (serve.listen's default: loopback, port 8470)
    assert "ionwarden serve -c " in result.stdout
    assert "--all" in result.stdout.split("ionwarden serve -c ", 1)[1].splitlines()[0]
    assert "open http://127.0.0.1:8470/" in result.stdout
    # The server was stopped (its data folder is named in the closing lines).
    data = result.stdout.split(" -D ")[1].split()[0]
    assert not (Path(data) / "postmaster.pid").exists()
    assert Path(data).is_dir()
    if tmp_path not in Path(data).parents:  # the cluster had to go under /tmp: remove it
        shutil.rmtree(Path(data).parent)
