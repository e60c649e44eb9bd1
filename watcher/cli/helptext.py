"""The exit codes each command can return, as the ``--help`` epilog shows them.

One table per command, built from ``ExitCode`` so that the numbers cannot drift from the code;
the words say what the code means for that command (README "Exit codes" says the same).
"""

from __future__ import annotations

from watcher.cli.exitcodes import ExitCode

_USAGE = "usage error, or a config problem (file, key and line named on stderr)"
_STORE_FINAL = (
    "a config problem, a state database written by a newer ionwarden or damaged, or another "
    "daemon on the same state_dir: a restart cannot cure it"
)

EXIT_CODES: dict[str, tuple[tuple[ExitCode, str], ...]] = {
    "check": (
        (ExitCode.OK, "every run ok or notice"),
        (ExitCode.ATTENTION, "a run is warning, critical or unreadable (it failed QC)"),
        (ExitCode.USAGE, _USAGE),
        (ExitCode.RUNTIME, "runtime failure (state folder unusable with --record, ...)"),
        (
            ExitCode.NO_INPUT,
            "a named file does not exist or cannot be opened; the others are still checked",
        ),
        (ExitCode.INTERRUPTED, "interrupted (Ctrl-C)"),
    ),
    "validate": (
        (ExitCode.OK, "the config is valid and `run` would start with it"),
        (ExitCode.USAGE, "a problem `run` would refuse: one line each on stderr"),
        (ExitCode.INTERRUPTED, "interrupted (Ctrl-C)"),
    ),
    "run": (
        (ExitCode.OK, "stopped by SIGTERM (systemd's stop)"),
        (ExitCode.USAGE, _STORE_FINAL),
        (ExitCode.RUNTIME, "a fault a restart may cure (state store unusable or lost, ...)"),
        (ExitCode.INTERRUPTED, "stopped by SIGINT (Ctrl-C)"),
    ),
    "digest": (
        (ExitCode.OK, "summary printed and HTML page written"),
        (ExitCode.USAGE, "a bad --date, or a config problem"),
        (
            ExitCode.RUNTIME,
            "no state database yet (the daemon never ran), or the HTML cannot be written",
        ),
        (ExitCode.INTERRUPTED, "interrupted (Ctrl-C)"),
    ),
    "status": (
        (ExitCode.OK, "nothing open: no open alerts, no undelivered messages"),
        (ExitCode.ATTENTION, "open alerts or undelivered messages"),
        (ExitCode.USAGE, "a config problem, or a state database written by a newer ionwarden"),
        (ExitCode.RUNTIME, "no state database yet (the daemon never ran)"),
        (ExitCode.INTERRUPTED, "interrupted (Ctrl-C)"),
    ),
    "demo": (
        (ExitCode.OK, "the demo ran to its end"),
        (ExitCode.USAGE, "usage error"),
        (ExitCode.RUNTIME, "the demo's daemon exited or a run got no verdict in time"),
        (ExitCode.INTERRUPTED, "interrupted (Ctrl-C)"),
    ),
    "serve": (
        (ExitCode.OK, "stopped (Ctrl-C or SIGTERM)"),
        (
            ExitCode.USAGE,
            "a config problem, an address off 127.0.0.1 without serve.token, or --all "
            "without central.url",
        ),
        (
            ExitCode.RUNTIME,
            "the address cannot be bound (in use, no permission), or with --all the central "
            "store cannot be read",
        ),
        (ExitCode.INTERRUPTED, "interrupted (Ctrl-C)"),
    ),
    "ack": (
        (ExitCode.OK, "the open alerts named are acknowledged (the daemon acts within a second)"),
        (ExitCode.USAGE, _USAGE),
        (ExitCode.RUNTIME, "no state database yet (the daemon never ran)"),
        (ExitCode.NO_TARGET, "no such open alert, check, subject or instrument: nothing changed"),
        (ExitCode.INTERRUPTED, "interrupted (Ctrl-C)"),
    ),
    "silence": (
        (ExitCode.OK, "the silence is added, listed or ended"),
        (ExitCode.USAGE, "a bad --for / --until time, or a config problem"),
        (ExitCode.RUNTIME, "no state database yet (the daemon never ran)"),
        (ExitCode.NO_TARGET, "no such silence, check, subject or instrument: nothing changed"),
        (ExitCode.INTERRUPTED, "interrupted (Ctrl-C)"),
    ),
    "note": (
        (ExitCode.OK, "the event is recorded (and marked on the digest charts)"),
        (ExitCode.USAGE, "a bad --at time, or a config problem"),
        (ExitCode.RUNTIME, "no state database yet (the daemon never ran)"),
        (ExitCode.NO_TARGET, "no such instrument: nothing changed"),
        (ExitCode.INTERRUPTED, "interrupted (Ctrl-C)"),
    ),
}


def epilog(command: str) -> str:
    """``exit codes:`` and one indented line per code (for RawDescriptionHelpFormatter)."""
    lines = ["exit codes:"]
    lines += [f"  {int(code):<4} {meaning}" for code, meaning in EXIT_CODES[command]]
    return "\n".join(lines)
