"""The cgroup OOM-kill counter: which file holds it (v2 or v1) and reading it from real files."""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher.daemon import cgroup

if TYPE_CHECKING:
    from pathlib import Path

# Linux admin guide, cgroup-v2 "memory.events" and cgroup-v1 "memory.oom_control" layouts.
V2_EVENTS = "low 0\nhigh 0\nmax 3\noom 2\noom_kill 2\noom_group_kill 0\n"
V1_OOM_CONTROL = "oom_kill_disable 0\nunder_oom 0\noom_kill 5\n"


def test_counter_files_for_v2_and_v1_hierarchies(tmp_path: Path) -> None:
    """'0::PATH' is the v2 hierarchy; a 'memory' controller line is v1's memory hierarchy."""
    text = "4:memory:/lab/ionwarden\n1:cpu:/\n0::/system.slice/ionwarden.service\n"
    assert cgroup.counter_files(text, tmp_path) == [
        tmp_path / "memory/lab/ionwarden/memory.oom_control",
        tmp_path / "system.slice/ionwarden.service/memory.events",
    ]


def test_oom_kill_count_reads_both_layouts() -> None:
    assert cgroup.oom_kill_count(V2_EVENTS) == 2
    assert cgroup.oom_kill_count(V1_OOM_CONTROL) == 5
    assert cgroup.oom_kill_count("low 0\n") is None


def test_oom_kills_from_real_files_and_none_when_unreadable(tmp_path: Path) -> None:
    """The first readable counter wins; without any, None (the caller then says 'killed')."""
    proc_cgroup = tmp_path / "cgroup"
    proc_cgroup.write_text("0::/system.slice/ionwarden.service\n")
    assert cgroup.oom_kills(proc_cgroup, tmp_path) is None
    events = tmp_path / "system.slice/ionwarden.service/memory.events"
    events.parent.mkdir(parents=True)
    events.write_text(V2_EVENTS)
    assert cgroup.oom_kills(proc_cgroup, tmp_path) == 2
    assert cgroup.oom_kills(tmp_path / "missing", tmp_path) is None
