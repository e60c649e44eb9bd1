"""The daemon and the CLI on stores of other versions: the committed version-1 store starts,
a store from a newer version is refused with exit 2 naming the file."""

from __future__ import annotations

import json
import sqlite3
from typing import TYPE_CHECKING

from tests.helpers.cli import run_cli
from tests.helpers.daemon import run_lines, write_lab_config
from tests.helpers.store import copy_fixture
from watcher import config as config_mod
from watcher.cli.main import main as cli_main
from watcher.daemon.main import Daemon
from watcher.store import db

if TYPE_CHECKING:
    from pathlib import Path


def test_the_daemon_starts_on_the_version_1_store(tmp_path: Path) -> None:
    """Start, replay the newest health lines from the migrated runs table, stop; status reads it."""
    copy_fixture(tmp_path / "state")
    # A long retention: the fixture's rows are months old and stay (pruning is tested apart).
    cfg = write_lab_config(tmp_path, health_log={"keep_days": 36500})
    daemon = Daemon(config_mod.load(cfg))
    daemon.start()
    daemon.close()
    lines = [json.loads(line) for line in run_lines(tmp_path / "state" / "health")]
    assert [(r["run_id"], r["file"], r["status"]) for r in lines] == [
        (1, "QC_001.mzML", "ok"),
        (2, "QC_002.mzML", "warning"),
        (3, "QC_003.mzML", "unreadable"),
    ]
    assert lines[1]["findings"][0]["value"] == 3.9
    assert cli_main(["status", "-c", str(cfg)]) == 1  # the fixture's alert is still open


def _newer_store(tmp_path: Path) -> tuple[Path, Path]:
    cfg = write_lab_config(tmp_path)
    db.connect(tmp_path / "state").close()
    path = tmp_path / "state" / db.DB_NAME
    raw = sqlite3.connect(path)
    raw.execute(f"PRAGMA user_version = {db.SCHEMA_VERSION + 1}")
    raw.commit()
    raw.close()
    return cfg, path


def test_the_daemon_refuses_a_store_from_a_newer_version_with_exit_2(tmp_path: Path) -> None:
    """The real ``ionwarden run`` process: exit 2 (systemd does not restart), the file named."""
    cfg, path = _newer_store(tmp_path)
    done = run_cli("run", "-c", str(cfg), cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    assert str(path) in done.stderr
    assert f"schema version {db.SCHEMA_VERSION + 1}" in done.stderr
    assert "Traceback" not in done.stderr
    raw = sqlite3.connect(path)
    assert raw.execute("PRAGMA user_version").fetchone()[0] == db.SCHEMA_VERSION + 1
    raw.close()


def test_the_cli_refuses_a_store_from_a_newer_version_with_exit_2(tmp_path: Path) -> None:
    cfg, path = _newer_store(tmp_path)
    done = run_cli("status", "-c", str(cfg), cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    assert str(path) in done.stderr


def test_the_upgraded_version_1_store_takes_an_acknowledgement(tmp_path: Path) -> None:
    """On the committed v1 store, once the daemon upgraded it: ``ack`` marks its open alert, the
    running daemon writes the health-log event, and ``status`` shows who acknowledged it."""
    import io
    from contextlib import redirect_stdout

    from tests.helpers.wait import wait_for

    copy_fixture(tmp_path / "state")
    cfg = write_lab_config(tmp_path, health_log={"keep_days": 36500})
    daemon = Daemon(config_mod.load(cfg))
    daemon.start()
    try:
        assert cli_main(["ack", "-c", str(cfg), "--by", "dana", "--note", "on my way"]) == 0

        def logged() -> bool:
            daemon.step()
            return any(
                '"kind": "alert.acknowledged"' in line
                for f in (tmp_path / "state" / "health").glob("health-*.jsonl")
                for line in f.read_text().splitlines()
            )

        wait_for(logged, 10, "the acknowledgement in the health log")
    finally:
        daemon.close()
    out = io.StringIO()
    with redirect_stdout(out):
        assert cli_main(["status", "-c", str(cfg), "--json"]) == 1  # still open, acknowledged
    (problem,) = json.loads(out.getvalue())["open_problems"]
    assert problem["acknowledged"].startswith("acknowledged by dana at ")
    assert problem["acknowledged"].endswith(": on my way")
