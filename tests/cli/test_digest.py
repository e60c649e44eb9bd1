"""ionwarden digest: argument handling without a state database (full run: tests/notify)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path


def test_digest_without_state_database_is_one_clear_line(tmp_path: Path) -> None:
    """No database yet: exit 3 and a line naming the missing database, no traceback."""
    cfg = tmp_path / "lab.yaml"
    cfg.write_text(f"instrument: {{name: Kestrel-2 Q-TOF}}\nstate_dir: {tmp_path / 'none'}\n")
    result = subprocess.run(
        [sys.executable, "-m", "watcher", "digest", "-c", str(cfg), "--date", "2026-03-10"],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert result.returncode == 3
    assert "no state database" in result.stderr
    assert "Traceback" not in result.stderr


def test_digest_rejects_a_malformed_date(tmp_path: Path) -> None:
    """--date 10/03/2026 exits 2 with the expected format named."""
    cfg = tmp_path / "lab.yaml"
    cfg.write_text("instrument: {name: Kestrel-2 Q-TOF}\n")
    result = subprocess.run(
        [sys.executable, "-m", "watcher", "digest", "-c", str(cfg), "--date", "10/03/2026"],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert result.returncode == 2
    assert "expected YYYY-MM-DD" in result.stderr
