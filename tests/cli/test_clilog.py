"""One-shot commands log library warnings to stderr without loading structlog, and configure it
the moment a module that logs through it is imported, so no log line reaches stdout either way.

The expectation is the issue "Faster to the first alert" (start-up: import the heavy parts only
on the paths that need them) and "The operator at 2 a.m." (no log line in a command's output).
"""

from __future__ import annotations

import json
import subprocess
import sys
from typing import TYPE_CHECKING

from tests.helpers.cli import cli_env
from tests.helpers.daemon import write_lab_config
from tests.helpers.refdata import REFERENCE

if TYPE_CHECKING:
    from pathlib import Path

TINY = REFERENCE / "mzml" / "tiny.pwiz.1.1.mzML"  # HUPO-PSI example file (tests/data/README.md)

_PROBE = """
import json, sys
from watcher.cli.main import main
code = main(sys.argv[1:])
loaded = sys.modules.get("structlog")
configured = loaded is not None and loaded.is_configured()
found = {"structlog": loaded is not None, "configured": configured}
sys.stderr.write("\\nPROBE " + json.dumps(found))
"""


def _probe(*args: str, cwd: Path) -> tuple[dict[str, object], str, str]:
    done = subprocess.run(
        [sys.executable, "-c", _PROBE, *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        env=cli_env(),
        timeout=120,
        check=False,
    )
    line = done.stderr.rsplit("PROBE ", 1)[1]
    return json.loads(line), done.stdout, done.stderr


def test_check_does_not_load_structlog(tmp_path: Path) -> None:
    probe, stdout, _ = _probe("check", "--json", "--no-progress", str(TINY), cwd=tmp_path)
    assert probe["structlog"] is False
    assert json.loads(stdout)["runs"][0]["file"] == TINY.name  # stdout: the JSON alone


def test_check_record_loads_it_configured_and_stdout_stays_clean(tmp_path: Path) -> None:
    """``--record`` stores the run through modules that log with structlog: it is loaded, set
    up for stderr, and stdout is still exactly the JSON document (one run)."""
    config = write_lab_config(tmp_path)
    probe, stdout, _ = _probe(
        "-v", "check", "-c", str(config), "--record", "--json", "--no-progress", str(TINY),
        cwd=tmp_path,
    )  # fmt: skip
    assert probe["structlog"] is True
    assert probe["configured"] is True  # not structlog's default, which prints to stdout
    assert len(json.loads(stdout)["runs"]) == 1
