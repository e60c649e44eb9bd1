"""The exceptions ionwarden raises on purpose, each carrying what a person needs to find the cause.

Tree::

    IonwardenError
    ├── ConfigError     a config file is wrong; carries every problem with file, line and key path
    ├── ReadError       a run file cannot be measured; carries the file and a one-line reason
    ├── StoreError      the state folder or database cannot be used (permissions, network mount)
    ├── StoreTooNewError  the database was written by a newer ionwarden (exit 2: a restart of
    │                   this version cannot fix it)
    ├── DaemonRunningError  another daemon holds the state folder's lock (exit 2)
    ├── StoreCorruptError the database file is damaged or not SQLite (exit 2; never touched)
    └── DeliveryError   an alert channel cannot be set up (apprise refused the URL)
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path


class IonwardenError(Exception):
    """Base of every error ionwarden raises deliberately."""


@dataclass(frozen=True, slots=True)
class ConfigProblem:
    """One thing wrong in a config file.

    Attributes:
        file: the config file's path as the user gave it.
        line: 1-based line of the offending key or value; None when the key is missing entirely.
        key_path: dotted/indexed path such as ``checks[2].critical.outside``.
        message: what was expected and what came.
    """

    file: str
    line: int | None
    key_path: str
    message: str

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}" if self.line is not None else self.file
        key = f" {self.key_path}:" if self.key_path else ""
        return f"{where}:{key} {self.message}"


class ConfigError(IonwardenError):
    """A config file is invalid. ``problems`` lists every problem, in line order."""

    def __init__(self, problems: list[ConfigProblem]) -> None:
        self.problems = sorted(problems, key=lambda p: (p.line or 0, p.key_path))
        super().__init__("\n".join(str(p) for p in self.problems))


class ReadError(IonwardenError):
    """A run file cannot be read completely; no metrics are produced from it.

    Attributes:
        path: the run file.
        reason: one line, no traceback, paths cut to the file name.
        kind: short machine-readable reason (``truncated``, ``corrupt``, ``xml-doctype``,
            ``empty``, ``wrong-format``, ``unsupported``, ``timeout``, ``memory``, ``io``,
            ``too-large``: a .mzML.gz inflating past ``limits.max_inflated_mb``).
    """

    def __init__(self, path: Path | str, reason: str, *, kind: str = "corrupt") -> None:
        self.path = Path(path)
        self.reason = reason
        self.kind = kind
        # A name that is not UTF-8 shows its bytes as \\xNN: the message must encode anywhere.
        name = os.fsencode(self.path.name).decode("utf-8", "backslashreplace")
        super().__init__(f"{name}: unreadable: {reason}")


class StoreError(IonwardenError):
    """The state folder or its SQLite database cannot be used."""


class StoreTooNewError(IonwardenError):
    """The state database carries a schema version newer than this ionwarden knows.

    Not a ``StoreError``: a store error may be cured by a restart (exit 3), this one only by
    installing the newer version again, so the commands exit 2 and systemd does not restart.

    Attributes:
        path: the database file.
        found_version: its ``PRAGMA user_version``.
        supported_version: the newest schema version this ionwarden knows.
    """

    def __init__(self, path: Path, found_version: int, supported_version: int) -> None:
        self.path = path
        self.found_version = found_version
        self.supported_version = supported_version
        super().__init__(
            f"state database {path} has schema version {found_version}, newer than version "
            f"{supported_version} that this ionwarden knows: it was written by a newer ionwarden "
            "(downgrades are not supported; install the newer version again, or point state_dir "
            "at another folder)"
        )


class DaemonRunningError(IonwardenError):
    """Another daemon holds the state folder's lock: two would split the jobs and judge files twice.

    Exit 2 like a bad config: restarting this one cannot help while the other runs.
    """


class StoreCorruptError(IonwardenError):
    """The state database file is damaged or is not an SQLite database at all.

    Not a ``StoreError``: a restart reads the same damaged file, so the commands exit 2 and
    systemd does not restart into it. Nothing is deleted or overwritten: the file may still hold
    the run history someone wants to recover, so the person decides (the message says how).

    Attributes:
        path: the database file.
        detail: what SQLite reported (the first problem ``PRAGMA quick_check`` found, or the
            open error).
    """

    def __init__(self, path: Path, detail: str) -> None:
        self.path = path
        self.detail = detail
        super().__init__(
            f"state database {path} is damaged ({detail}): stop the daemon, move the file aside "
            f"(with its -wal and -shm files, e.g. mv {path} {path}.damaged), and start again; "
            "the daemon then starts a new, empty store (the run history stays in the moved file)"
        )


class DeliveryError(IonwardenError):
    """An alert channel cannot be used (apprise refused its URL); names the channel, not the URL."""
