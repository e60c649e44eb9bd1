"""What ``ack``, ``silence`` and ``note`` share: the state store opened for writing, the names.

These commands write while the daemon runs, through the same SQLite file and ``BEGIN
IMMEDIATE`` transactions (``watcher.store.db.write``); the daemon reads the rows they leave
within a second. A target that does not exist is refused with one line and ``NO_TARGET``.
"""

from __future__ import annotations

import getpass
import sys
from typing import TYPE_CHECKING

from watcher.cli.exitcodes import ExitCode
from watcher.config import Config, state_dir_of
from watcher.errors import StoreError
from watcher.records import printable

if TYPE_CHECKING:
    import sqlite3

# Alerts that are no check of the config: an unreadable run file, runs that stopped coming.
PSEUDO_CHECKS = ("unreadable", "heartbeat")


class Refused(Exception):
    """The command names something that does not exist; ``code`` is the exit code."""

    def __init__(self, message: str, code: ExitCode = ExitCode.NO_TARGET) -> None:
        super().__init__(message)
        self.code = code


def refuse(command: str, exc: Refused) -> int:
    sys.stderr.write(f"ionwarden {command}: {printable(str(exc))}\n")
    return int(exc.code)


def open_store(config: Config, *, must_exist: bool) -> sqlite3.Connection:
    """The state database for writing (``must_exist``: refuse when the daemon never ran)."""
    from watcher.store import db

    state_dir = state_dir_of(config)
    if must_exist and not (state_dir / db.DB_NAME).exists():
        raise Refused(
            f"no state database in {state_dir} yet (has the daemon run?)", ExitCode.RUNTIME
        )
    try:
        return db.connect(state_dir)
    except StoreError as exc:
        raise Refused(str(exc), ExitCode.RUNTIME) from exc


def instrument_of(config: Config, name: str | None) -> str:
    """``--instrument``: the config's instrument, or refused when another one is named."""
    if name is None or name == config.instrument.name:
        return config.instrument.name
    raise Refused(
        f"no instrument named {name!r} in {config.source or 'the config'} "
        f"(it watches {config.instrument.name!r})"
    )


def check_of(config: Config, name: str | None) -> str | None:
    """``--check``: a check of the config (or an unreadable/heartbeat alert), else refused."""
    if name is None:
        return None
    known = [c.name for c in config.checks] + list(PSEUDO_CHECKS)
    if name in known:
        return name
    import difflib

    nearest = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
    hint = f" (did you mean {nearest[0]!r}?)" if nearest else ""
    raise Refused(f"no check named {name!r} in {config.source or 'the config'}{hint}")


def who(by: str | None) -> str:
    """``--by NAME``, else the login name of the person running the command."""
    if by:
        return by
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return "unknown"


def subject_of_config(config: Config, name: str | None) -> str | None:
    """``--subject``: a calibrant or expected ion name, a metric path, ``file`` or ``runs``."""
    if name is None:
        return None
    from watcher.config import known_metric_paths

    calibrants = [c.name for c in config.calibrants]
    ions = [e.ion.name for e in config.expected_ions]
    known = [*calibrants, *ions, "file", "runs", "signal", "expected_ions", "mass_correction"]
    known += list(known_metric_paths(calibrants, ions))
    if name in known:
        return name
    import difflib

    nearest = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
    hint = f" (did you mean {nearest[0]!r}?)" if nearest else ""
    raise Refused(
        f"no subject named {name!r} in {config.source or 'the config'}: give a calibrant or "
        f"expected ion name, a metric path, file or runs{hint}"
    )
