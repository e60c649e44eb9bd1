"""What ``run`` checks before it starts, as config problems: one list for ``validate`` and ``run``.

A config that names a folder that is not there, or an alert URL apprise cannot use, is a config
problem: no restart fixes it, so ``run`` exits 2 for it (systemd's ``RestartPreventExitStatus``)
and ``validate`` reports it first. Faults a restart may cure (a disk that comes back) stay
runtime errors (exit 3).
"""

from __future__ import annotations

import os
import shutil
from typing import TYPE_CHECKING

from watcher.config import state_dir_of
from watcher.errors import ConfigProblem, DeliveryError

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.config import Config


def problems(config: Config) -> list[ConfigProblem]:
    """Every reason ``run`` would refuse this config at start-up, each naming its key."""
    source = str(config.source) if config.source is not None else "<config>"
    out: list[ConfigProblem] = []

    def add(key: str, message: str) -> None:
        out.append(ConfigProblem(source, None, key, message))

    if not config.watch.folders:
        # A daemon that watches nothing would look healthy to systemd while missing every run.
        add(
            "watch.folders",
            "the daemon needs at least one folder to watch (the instrument's export folder), "
            "got none",
        )
    for i, folder in enumerate(config.watch.folders):
        why = _folder_problem(folder)
        if why is not None:
            add(f"watch.folders[{i}]", f"{folder}: {why}")
    state_dir = state_dir_of(config)
    why = _state_dir_problem(state_dir)
    if why is not None:
        add("state_dir", f"{state_dir}: {why}")
    if config.convert.command:
        why = converter_problem(config.convert.command[0])
        if why is not None:
            add("convert.command[0]", why)
    from watcher.notify import deliver

    for i, channel in enumerate(config.alerts.channels):
        try:
            deliver.make_target(channel, config.alerts)
        except DeliveryError as exc:
            # The message names the channel and the scheme only, never the URL (it may hold a
            # password or a token).
            add(f"alerts.channels[{i}].url", str(exc))
    return out


def _folder_problem(folder: Path) -> str | None:
    if not folder.exists():
        return "does not exist"
    if not folder.is_dir():
        return "is not a folder"
    if not os.access(folder, os.R_OK | os.X_OK):
        return "cannot be read (permissions)"
    return None


def _state_dir_problem(state_dir: Path) -> str | None:
    """Whether the daemon can create or write its state folder (nothing is created here)."""
    if state_dir.exists():
        if not state_dir.is_dir():
            return "exists and is not a folder"
        if not os.access(state_dir, os.W_OK | os.X_OK):
            return "is not writable"
        return None
    parent = state_dir.parent
    while not parent.exists() and parent != parent.parent:
        parent = parent.parent
    if not parent.is_dir() or not os.access(parent, os.W_OK | os.X_OK):
        return f"cannot be created ({parent} is not a writable folder)"
    return None


def converter_problem(program: str) -> str | None:
    """Whether the converter program can be run: a path that is an executable file, or a bare
    name found in PATH (as ``subprocess`` looks it up, without a shell)."""
    if "{" in program:
        return f"{program}: the program itself cannot be a placeholder"
    if os.sep not in program:
        if shutil.which(program) is None:
            return f"{program}: no such program in PATH"
        return None
    if not os.path.exists(program):
        return f"{program}: does not exist"
    if not os.path.isfile(program):
        return f"{program}: is not a file"
    if not os.access(program, os.X_OK):
        return f"{program}: is not executable (chmod +x)"
    return None
