"""The daemon keeps watching through what a lab's disks and shares throw at it: names that are
not UTF-8, a store that cannot be written, a health log that cannot be written, a store
re-created from scratch, copies of a run already judged. A real subprocess on real folders."""

from __future__ import annotations

import json
import os
from typing import TYPE_CHECKING

from tests.helpers.cli import run_cli

if TYPE_CHECKING:
    from tests.helpers.daemon import Lab

ODD_NAME = b"latin1_\xe9\xff.mzML"  # Latin-1 bytes, as a share written by another system has them
ODD_SHOWN = "latin1_\\xe9\\xff.mzML"  # how logs, the health log and status show it


def test_a_name_that_is_not_utf8_is_judged_and_the_daemon_restarts(lab: Lab) -> None:
    """The odd name and its neighbours are judged; logs, health log and status show the bytes
    as \\xNN; a restart finds the job known (no second judgement, no crash)."""
    lab.drop("QC_before.mzML", 1)
    with open(os.fsencode(lab.exports) + b"/" + ODD_NAME, "wb") as fh:
        fh.write(lab.run_bytes(2))
    lab.drop("QC_after.mzML", 3)
    d = lab.start()
    lab.wait_runs(3)
    assert d.stop() == 0
    odd = os.fsdecode(ODD_NAME)
    assert sorted(lab.runs_by_name()) == sorted(["QC_before.mzML", odd, "QC_after.mzML"])
    assert {r["file"] for r in lab.health_runs()} == {"QC_before.mzML", ODD_SHOWN, "QC_after.mzML"}
    judged = [e for e in d.events() if e["event"] == "run.judged"]
    assert ODD_SHOWN in {os.path.basename(e["file"]) for e in judged}
    status = run_cli("status", "-c", lab.config, "--json")
    assert status.returncode == 0, status.stderr
    assert ODD_SHOWN in {r["file"] for r in json.loads(status.stdout)["last_runs"]}
    d2 = lab.start()
    lab.drop("QC_later.mzML", 4)
    lab.wait_runs(4)
    assert d2.stop() == 0
    assert lab.runs_by_name()[odd] == 1
    assert "Traceback" not in d.stderr() + d2.stderr()


def test_check_record_takes_a_name_that_is_not_utf8(lab: Lab) -> None:
    """``ionwarden check --record`` on the odd name: recorded, shown escaped, exit 0."""
    path = os.fsencode(lab.exports) + b"/" + ODD_NAME
    with open(path, "wb") as fh:
        fh.write(lab.run_bytes(5))
    done = run_cli("check", "-c", lab.config, "--record", os.fsdecode(path))
    assert done.returncode == 0, done.stderr
    assert ODD_SHOWN in done.stdout
    assert lab.runs_by_name() == {os.fsdecode(ODD_NAME): 1}
