"""The exit codes every ``ionwarden`` command keeps, in one place.

systemd's unit treats ``USAGE`` as final (``RestartPreventExitStatus=2``): a config problem is not
cured by a restart. ``RUNTIME`` is for faults a restart may cure (state folder, channel refused).
"""

from __future__ import annotations

from enum import IntEnum


class ExitCode(IntEnum):
    OK = 0
    """All good (for ``check``: every run ``ok`` or ``notice``)."""
    ATTENTION = 1
    """``check``: a run is ``warning``, ``critical`` or ``unreadable``; ``status``: open alerts or
    undelivered messages."""
    USAGE = 2
    """Usage or configuration error, or a state database written by a newer version: a restart
    cannot fix it."""
    RUNTIME = 3
    """Runtime failure (state folder unusable, no state yet, alert channel refused, ...)."""
    NO_INPUT = 4
    """``check``: a file named on the command line does not exist or cannot be opened (the
    other files are still checked and reported)."""
    NO_TARGET = 5
    """``ack``, ``silence``, ``note``: what the command names does not exist (no open alert, no
    such check, instrument or silence); nothing was changed."""
    INTERRUPTED = 130
    """Interrupted (Ctrl-C)."""
