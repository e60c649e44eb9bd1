"""The daemon guards its state folder: one daemon per state_dir, and a store deleted under a
running daemon stops it rather than letting it judge into a file nobody can read.

Expectations come from the issue "Nothing stops the watch" (items 10 and 14) and
docs/reliability.md item 5 (the store is the history) and item 7 (exit 2 is final for systemd).
"""

from __future__ import annotations

import shutil
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from tests.helpers.daemon import Lab


def test_second_daemon_on_same_state_dir_exits_2_naming_the_holder(lab: Lab) -> None:
    """A second `ionwarden run` on the same state_dir exits 2 naming the first one's pid; the
    first goes on and judges each file once."""
    first = lab.start()
    second = lab.start(ready=False)
    assert second.proc.wait(timeout=20) == 2
    assert f"pid {first.proc.pid}" in second.stderr()
    assert "Traceback" not in second.stderr()
    assert "READY=1" not in second.notes()
    for n in range(3):
        lab.drop(f"QC_{n}.mzML", n)
    lab.wait_runs(3)
    assert first.stop() == 0
    assert sorted(lab.runs_by_name().values()) == [1, 1, 1]
    # The lock goes with the process: the next daemon starts.
    third = lab.start()
    assert third.stop() == 0


def test_state_folder_deleted_while_running_stops_with_exit_3(lab: Lab) -> None:
    """`rm -rf state_dir` under a running daemon: it notices within seconds, says so on stderr
    and exits 3 (a runtime fault), instead of judging on into a deleted database."""
    d = lab.start()
    lab.drop("QC_before.mzML", 1)
    lab.wait_runs(1)
    shutil.rmtree(lab.state)
    assert d.proc.wait(timeout=20) == 3
    err = d.stderr()
    assert "state.lost" in err
    assert f"state folder {lab.state} was deleted" in err
    assert "Traceback" not in err
