"""Logging of the one-shot commands, set up without structlog unless a module that logs through it
is imported.

structlog (with asyncio and, where installed, rich) costs more to import than measuring a small
run: ``ionwarden check`` and ``validate`` need only the standard library's logging, for library
warnings on stderr. The full console set-up (``watcher.daemon.logs.configure_cli``) is made
at once when structlog is loaded already, and otherwise the moment it is first imported (a
command that stores or sends, such as ``check --record``, imports modules that log through it),
so a structlog line never goes to structlog's default, stdout.
"""

from __future__ import annotations

import importlib.machinery
import logging
import sys
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from collections.abc import Sequence
    from types import ModuleType


def configure(level: int) -> None:
    """stderr logging at ``level`` for a one-shot command (see the module docstring)."""
    if "structlog" in sys.modules:
        _full(level)
        return
    root = logging.getLogger()
    for old in list(root.handlers):
        root.removeHandler(old)
        old.close()
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(_Plain())
    root.addHandler(handler)
    root.setLevel(level)
    # As watcher.daemon.logs: apprise logs URL passwords at TRACE and bodies at DEBUG.
    logging.getLogger("apprise").setLevel(logging.INFO)
    logging.getLogger("watchdog").setLevel(logging.WARNING)
    logging.captureWarnings(False)
    logging.captureWarnings(True)
    if not any(isinstance(f, _WhenStructlogLoads) for f in sys.meta_path):
        sys.meta_path.insert(0, _WhenStructlogLoads(level))


def _full(level: int) -> None:
    from watcher.daemon import logs

    logs.configure_cli(level=level)


class _Plain(logging.Formatter):
    """``[warning] logger: message``, control characters escaped (outside text)."""

    def format(self, record: logging.LogRecord) -> str:
        from watcher.records import printable

        return f"[{record.levelname.lower()}] {record.name}: {printable(record.getMessage())}"


class _WhenStructlogLoads:
    """A meta path finder (``find_spec`` is the whole protocol; importlib.abc would cost more
    to import than it saves) that runs the full set-up right after structlog has loaded, once."""

    def __init__(self, level: int) -> None:
        self.level = level

    def find_spec(
        self, fullname: str, path: Sequence[str] | None, target: ModuleType | None = None
    ) -> importlib.machinery.ModuleSpec | None:
        if fullname != "structlog":
            return None
        sys.meta_path.remove(self)  # the real finders below give the spec
        spec = importlib.machinery.PathFinder.find_spec(fullname, path)
        if spec is None or spec.loader is None:
            return spec
        loader = spec.loader
        exec_module = loader.exec_module
        level = self.level

        def exec_then_configure(module: ModuleType) -> None:
            exec_module(module)
            _full(level)

        loader.exec_module = exec_then_configure  # type: ignore[method-assign]
        return spec
