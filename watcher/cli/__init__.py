"""The ``ionwarden`` command line: one module per command, one exit-code enum, the progress bar."""

from watcher.cli.exitcodes import ExitCode
from watcher.cli.main import main

__all__ = ["ExitCode", "main"]
