"""``ionwarden validate -c FILE``: load a config and report it ok, or list every problem in it.

Exit 0 when the config is valid; exit 2 when it is not, because no restart can fix a bad config
(the systemd unit lists 2 in ``RestartPreventExitStatus``). Beyond the file itself it checks
what ``run`` checks at start-up (``watcher.daemon.preflight``): the watch folders exist and can
be read, the state folder can be created or written, apprise can use every alert URL, the
converter program (``convert.command``) exists and is executable.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import TYPE_CHECKING

from watcher.cli.exitcodes import ExitCode
from watcher.config.load import load_config
from watcher.errors import ConfigError

if TYPE_CHECKING:
    import argparse


def summary(path: str, *, checks: int, calibrants: int, expected_ions: int, channels: int) -> str:
    """The one line printed for a valid config."""
    return (
        f"{path}: ok ({checks} checks, {calibrants} calibrants, {expected_ions} expected ions, "
        f"{channels} channels)"
    )


def main(args: argparse.Namespace) -> int:
    """Validate ``args.config``; prints one ok line to stdout or one line per problem to stderr."""
    path = str(args.config)
    try:
        config = load_config(Path(path))
    except ConfigError as exc:
        for problem in exc.problems:
            sys.stderr.write(f"{problem}\n")
        return ExitCode.USAGE
    from watcher.daemon import preflight

    # What ``run`` would refuse at start-up (folders, state folder, alert URLs): the same list.
    found = [] if getattr(args, "file_only", False) else preflight.problems(config)
    if found:
        for problem in found:
            sys.stderr.write(f"{problem}\n")
        return ExitCode.USAGE
    line = summary(
        path,
        checks=len(config.checks),
        calibrants=len(config.calibrants),
        expected_ions=len(config.expected_ions),
        channels=len(config.alerts.channels),
    )
    sys.stdout.write(line + "\n")
    return ExitCode.OK
