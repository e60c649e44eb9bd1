"""The ``ionwarden`` command line: argument parsing, dispatch to the command modules, exit codes.

Exit codes (every command):
    0    all good (for ``check``: every run ``ok`` or ``notice``)
    1    ``check``: at least one run is ``warning``, ``critical`` or ``unreadable``;
         ``status``: the daemon has open alerts or undelivered messages
    2    usage or configuration error, a state database written by a newer ionwarden, or a
         damaged state database: a restart cannot fix it (systemd RestartPreventExitStatus=2)
    3    runtime failure (state folder unusable, alert channel refused, ...)
    130  interrupted (Ctrl-C)
"""

from __future__ import annotations

import argparse
import importlib
import sys
from typing import TYPE_CHECKING

from watcher import __version__
from watcher.cli.exitcodes import ExitCode
from watcher.errors import (
    ConfigError,
    DaemonRunningError,
    IonwardenError,
    StoreCorruptError,
    StoreTooNewError,
)

if TYPE_CHECKING:
    from collections.abc import Sequence

# command -> module whose ``main(args) -> int`` runs it; imported lazily so that
# ``ionwarden validate`` does not pay for numpy, pyteomics or matplotlib.
_COMMANDS = {
    "check": "watcher.cli.check",
    "validate": "watcher.cli.validate",
    "run": "watcher.daemon.main",
    "digest": "watcher.cli.digest",
    "status": "watcher.cli.status",
    "demo": "watcher.cli.demo",
    "serve": "watcher.cli.serve",
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ionwarden",
        description="Watch mass-spectrometry exports and judge every run's health.",
    )
    parser.add_argument("--version", action="version", version=f"ionwarden {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def config_arg(p: argparse.ArgumentParser, *, required: bool) -> None:
        p.add_argument(
            "-c",
            "--config",
            required=required,
            metavar="CONFIG",
            help="lab config (YAML)" + ("" if required else "; default: the embedded demo config"),
        )

    p = sub.add_parser("check", help="measure and judge run files once, print the result")
    p.add_argument("files", nargs="+", metavar="FILE")
    config_arg(p, required=False)
    p.add_argument("--json", action="store_true", help='print {"runs": [...]} as JSON')
    p.add_argument("--mzqc", metavar="PATH", help="also write the run metrics as an mzQC file")
    p.add_argument("--record", action="store_true", help="add the runs to the history in state_dir")
    p.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")

    p = sub.add_parser(
        "validate",
        help="check a config file, and what `run` checks at start-up, and report every problem",
    )
    config_arg(p, required=True)
    p.add_argument(
        "--file-only",
        action="store_true",
        help="check the file alone, not the folders and alert URLs it names "
        "(for a config written for another machine)",
    )

    p = sub.add_parser("run", help="the daemon, in the foreground (for systemd)")
    config_arg(p, required=True)

    p = sub.add_parser("digest", help="the daily digest: terminal summary and HTML page with plots")
    config_arg(p, required=True)
    p.add_argument("--date", metavar="YYYY-MM-DD", help="day in the instrument's time zone")
    p.add_argument("--out", metavar="PATH", help="where to write the HTML (default: state_dir)")

    p = sub.add_parser(
        "status", help="the daemon's state: last runs, open alerts, pending messages"
    )
    config_arg(p, required=True)
    p.add_argument("--json", action="store_true")

    p = sub.add_parser(
        "serve", help="the read-only floor page: every instrument's status, runs and charts"
    )
    p.add_argument(
        "-c",
        "--config",
        required=True,
        action="append",
        metavar="CONFIG",
        help="an instrument's lab config (YAML); repeat for each instrument on the page",
    )
    p.add_argument(
        "--listen", metavar="HOST:PORT", help="address to serve on (default: serve.listen)"
    )

    p = sub.add_parser("demo", help="the whole pipeline on the bundled demo runs")
    p.add_argument("--notify-url", metavar="URL", help="also send the alerts to this apprise URL")
    p.add_argument("--workdir", metavar="DIR", help="keep the demo's folders here")
    p.add_argument("--fast", action="store_true", help="no pauses between arriving runs")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run one ``ionwarden`` command; returns the process exit code (see the module docstring)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse exits 2 on usage errors, 0 on --help
        return int(exc.code or 0)
    if args.command != "run":
        # Library warnings of a one-shot command go to stderr, never into its stdout (JSON
        # output stays parseable) nor the daemon's log file; ``run`` sets up its own logging.
        from watcher.daemon import logs

        logs.configure_cli()
    try:
        module = importlib.import_module(_COMMANDS[args.command])
        code: int = module.main(args)
        return code
    except ConfigError as exc:
        print(str(exc), file=sys.stderr)
        return ExitCode.USAGE
    except (StoreTooNewError, StoreCorruptError, DaemonRunningError) as exc:
        # Like a bad config, a restart cannot cure it (a newer or damaged store; another daemon
        # on the same state folder): systemd must not loop.
        print(f"ionwarden: {exc}", file=sys.stderr)
        return ExitCode.USAGE
    except IonwardenError as exc:
        print(f"ionwarden: {exc}", file=sys.stderr)
        return ExitCode.RUNTIME
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return ExitCode.INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
