"""ionwarden --help and -v, through the real command in a subprocess: every subcommand has help
for each argument and lists its exit codes; logs stay off stdout and below warning unless -v."""

from __future__ import annotations

import re
from typing import TYPE_CHECKING

import pytest

from tests.helpers.cli import run_cli
from watcher.cli.exitcodes import ExitCode
from watcher.store import db

if TYPE_CHECKING:
    from pathlib import Path

COMMANDS = ("check", "validate", "run", "digest", "status", "demo")


def _options(help_text: str) -> list[tuple[str, str]]:
    """(argument, its help) for each entry of argparse's options/positionals blocks."""
    out: list[tuple[str, str]] = []
    block = False
    for line in help_text.splitlines():
        if line.endswith(":") and not line.startswith(" "):
            block = line in ("options:", "positional arguments:")
            continue
        if not block or not line.strip():
            continue
        if m := re.match(r"^  (\S.*?)(?:\s{2,}(\S.*))?$", line):
            out.append((m.group(1), m.group(2) or ""))
        elif out and line.startswith("   "):  # the help wrapped onto its own line(s)
            arg, text = out[-1]
            out[-1] = (arg, f"{text} {line.strip()}".strip())
    return out


@pytest.mark.parametrize("command", COMMANDS)
def test_every_subcommand_help_explains_each_argument_and_its_exit_codes(command: str) -> None:
    """``ionwarden COMMAND --help`` exits 0, gives every argument a help text, and ends with an
    ``exit codes:`` block whose codes are ExitCode values, 0 and 2 always among them."""
    result = run_cli(command, "--help")
    assert result.returncode == 0, result.stderr
    options = _options(result.stdout)
    assert options, result.stdout
    assert [arg for arg, text in options if not text] == []
    assert "-v, --verbose" in [arg for arg, _ in options]
    epilog = result.stdout.split("exit codes:\n", 1)[1]
    codes = [int(m) for m in re.findall(r"^  (\d+) {2,}\S", epilog, flags=re.MULTILINE)]
    assert set(codes) <= {int(c) for c in ExitCode}
    assert {0, 2, 130} <= set(codes)


def test_check_help_lists_its_own_missing_file_code() -> None:
    """``check`` has the missing-file code (4) that no other command returns."""
    assert re.search(r"^  4 +a named file does not exist", run_cli("check", "--help").stdout, re.M)
    assert "\n  4 " not in run_cli("status", "--help").stdout


def _lab(tmp_path: Path) -> Path:
    state = tmp_path / "state"
    db.connect(state).close()  # a state database, as the daemon leaves it
    cfg = tmp_path / "lab.yaml"
    cfg.write_text(f"instrument: {{name: Kestrel-2 Q-TOF, timezone: UTC}}\nstate_dir: {state}\n")
    return cfg


def test_digest_prints_no_log_line_without_verbose(tmp_path: Path) -> None:
    """Without -v, ``digest`` prints its summary and HTML path and no info log line anywhere."""
    cfg = _lab(tmp_path)
    result = run_cli("digest", "-c", cfg, "--date", "2026-03-10", "--out", tmp_path / "d.html")
    assert result.returncode == 0, result.stderr
    assert "digest.written" not in result.stdout + result.stderr
    assert "[info" not in result.stdout + result.stderr
    assert result.stdout.rstrip().endswith(f"HTML: {tmp_path / 'd.html'}")


@pytest.mark.parametrize("where", ["before", "after"])
def test_verbose_puts_info_lines_on_stderr_only(tmp_path: Path, where: str) -> None:
    """``-v`` before or after the command: the info line goes to stderr, stdout stays the
    command's own output."""
    cfg = _lab(tmp_path)
    args = ["digest", "-c", str(cfg), "--date", "2026-03-10", "--out", str(tmp_path / "d.html")]
    argv = ["-v", *args] if where == "before" else [*args, "-v"]
    result = run_cli(*argv)
    assert result.returncode == 0, result.stderr
    assert "digest.written" in result.stderr
    assert "digest.written" not in result.stdout
