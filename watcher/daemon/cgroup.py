"""How many processes of the daemon's cgroup the kernel's OOM killer has killed, where readable.

A measuring child that dies of SIGKILL without a word may have been OOM-killed (the unit's
MemoryMax, the machine's memory) or killed by a person or a supervisor. The memory controller
counts OOM kills: cgroup v2 ``memory.events`` and cgroup v1 ``memory.oom_control`` (Linux 4.13+)
both have an ``oom_kill N`` line. The child shares the daemon's cgroup, so the count before and
after a measurement tells the two apart. Parsing is pure; ``oom_kills()`` does the reading.
"""

from __future__ import annotations

from pathlib import Path

CGROUP_ROOT = Path("/sys/fs/cgroup")
PROC_SELF_CGROUP = Path("/proc/self/cgroup")


def counter_files(proc_self_cgroup: str, root: Path = CGROUP_ROOT) -> list[Path]:
    """The files that may hold this process's ``oom_kill`` count, most specific first.

    ``/proc/self/cgroup`` lines are ``ID:CONTROLLERS:PATH``; ``0::PATH`` is the cgroup v2
    hierarchy, a line whose controllers include ``memory`` is the v1 memory hierarchy.
    """
    files: list[Path] = []
    for line in proc_self_cgroup.splitlines():
        parts = line.split(":", 2)
        if len(parts) != 3:
            continue
        hierarchy, controllers, path = parts
        relative = path.lstrip("/")
        if hierarchy == "0" and controllers == "":
            files.append(root / relative / "memory.events")
        elif "memory" in controllers.split(","):
            files.append(root / "memory" / relative / "memory.oom_control")
    return files


def oom_kill_count(text: str) -> int | None:
    """The ``oom_kill N`` value of a memory.events or memory.oom_control file, or None."""
    for line in text.splitlines():
        key, _, value = line.partition(" ")
        if key == "oom_kill" and value.strip().isdigit():
            return int(value)
    return None


def oom_kills(proc_self_cgroup: Path = PROC_SELF_CGROUP, root: Path = CGROUP_ROOT) -> int | None:
    """This cgroup's OOM-kill count, or None where no counter is readable (no cgroup mount,
    another OS, a sandbox hiding /sys)."""
    try:
        files = counter_files(proc_self_cgroup.read_text(), root)
    except OSError:
        return None
    for path in files:
        try:
            count = oom_kill_count(path.read_text())
        except OSError:
            continue
        if count is not None:
            return count
    return None
