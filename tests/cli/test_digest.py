"""ionwarden digest: argument handling without a state database (full run: tests/notify)."""

from __future__ import annotations

from typing import TYPE_CHECKING

from tests.helpers.cli import run_cli

if TYPE_CHECKING:
    from pathlib import Path


def test_digest_without_state_database_is_one_clear_line(tmp_path: Path) -> None:
    """No database yet: exit 3 and a line naming the missing database, no traceback."""
    cfg = tmp_path / "lab.yaml"
    cfg.write_text(f"instrument: {{name: Kestrel-2 Q-TOF}}\nstate_dir: {tmp_path / 'none'}\n")
    result = run_cli("digest", "-c", cfg, "--date", "2026-03-10")
    assert result.returncode == 3
    assert "no state database" in result.stderr
    assert "Traceback" not in result.stderr


def test_digest_rejects_a_malformed_date(tmp_path: Path) -> None:
    """--date 10/03/2026 exits 2 with the expected format named."""
    cfg = tmp_path / "lab.yaml"
    cfg.write_text("instrument: {name: Kestrel-2 Q-TOF}\n")
    result = run_cli("digest", "-c", cfg, "--date", "10/03/2026")
    assert result.returncode == 2
    assert "expected YYYY-MM-DD" in result.stderr
