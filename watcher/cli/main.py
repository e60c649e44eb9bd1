"""The ``ionwarden`` command line: argument parsing, dispatch to the command modules, exit codes.

Logs go to stderr, warnings and errors only unless ``-v`` (before or after the command); a
command's normal output on stdout carries no log line.

Exit codes (every command; each command's ``--help`` lists its own, from ``helptext``):
    0    all good (for ``check``: every run ``ok`` or ``notice``)
    1    ``check``: at least one run is ``warning``, ``critical`` or ``unreadable``;
         ``status``: the daemon has open alerts or undelivered messages
    2    usage or configuration error, a state database written by a newer ionwarden, or a
         damaged state database: a restart cannot fix it (systemd RestartPreventExitStatus=2)
    3    runtime failure (state folder unusable, alert channel refused, ...)
    5    ``ack``, ``silence``, ``note``: the alert, check, subject, silence or instrument named
         does not exist; nothing was changed
    130  interrupted (Ctrl-C)
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from typing import TYPE_CHECKING

from watcher import __version__
from watcher.cli import helptext
from watcher.cli.exitcodes import ExitCode
from watcher.kinds import NOTE_KINDS

if TYPE_CHECKING:
    from collections.abc import Sequence

# numpy's OpenBLAS starts a spinning thread per core when numpy is imported: about 0.15 s of CPU
# in every `ionwarden check` on this project's 2-core bench machine (measured 2026-12-04), for
# linear algebra that is a few small line fits. One thread, unless the user asked for more;
# set here, before anything imports numpy, so the measuring children inherit it.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

# command -> module whose ``main(args) -> int`` runs it; imported lazily so that
# ``ionwarden validate`` does not pay for numpy, pyteomics or matplotlib.
_COMMANDS = {
    "check": "watcher.cli.check",
    "validate": "watcher.cli.validate",
    "run": "watcher.daemon.main",
    "digest": "watcher.cli.digest",
    "status": "watcher.cli.status",
    "demo": "watcher.cli.demo",
    "ack": "watcher.cli.ack",
    "silence": "watcher.cli.silence",
    "note": "watcher.cli.note",
    "serve": "watcher.cli.serve",
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ionwarden",
        description="Watch mass-spectrometry exports and judge every run's health.",
        epilog="Each command lists its exit codes in its own --help (ionwarden COMMAND --help).",
    )
    parser.add_argument("--version", action="version", version=f"ionwarden {__version__}")
    verbose_help = (
        "log at info level too (default: warnings and errors only, on stderr; for `run`: "
        "ionwarden's own debug lines too)"
    )
    parser.add_argument("-v", "--verbose", action="count", default=0, help=verbose_help)
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def command(name: str, help_text: str) -> argparse.ArgumentParser:
        p = sub.add_parser(
            name,
            help=help_text,
            description=help_text[:1].upper() + help_text[1:] + ".",
            epilog=helptext.epilog(name),
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        # Also after the command (``ionwarden digest -v``); SUPPRESS keeps a -v given before it.
        p.add_argument(
            "-v", "--verbose", action="count", default=argparse.SUPPRESS, help=verbose_help
        )
        return p

    def config_arg(p: argparse.ArgumentParser, *, required: bool) -> None:
        p.add_argument(
            "-c",
            "--config",
            required=required,
            metavar="CONFIG",
            help="lab config (YAML)" + ("" if required else "; default: the embedded demo config"),
        )

    p = command("check", "measure and judge run files once, print the result")
    p.add_argument(
        "files", nargs="+", metavar="FILE", help="run files: mzML, mzML.gz, mzXML or MGF"
    )
    config_arg(p, required=False)
    p.add_argument("--json", action="store_true", help='print {"runs": [...]} as JSON')
    p.add_argument(
        "--mzqc", metavar="PATH", help="also write the run metrics as an mzQC file (- : stdout)"
    )
    p.add_argument("--record", action="store_true", help="add the runs to the history in state_dir")
    p.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")

    p = command(
        "validate",
        "check a config file, and what `run` checks at start-up, and report every problem",
    )
    config_arg(p, required=True)
    p.add_argument(
        "--file-only",
        action="store_true",
        help="check the file alone, not the folders and alert URLs it names "
        "(for a config written for another machine)",
    )

    p = command("run", "the daemon, in the foreground (for systemd)")
    config_arg(p, required=True)

    p = command("digest", "the daily digest: terminal summary and HTML page with plots")
    config_arg(p, required=True)
    p.add_argument(
        "--date",
        metavar="YYYY-MM-DD",
        help="day in the instrument's time zone, or today / yesterday (default: today)",
    )
    p.add_argument(
        "--out",
        metavar="PATH",
        help="where to write the HTML (default: <state_dir>/digests/digest-DAY.html)",
    )
    central_args(p)

    p = command("status", "the daemon's state: last runs, open alerts, pending messages")
    config_arg(p, required=True)
    p.add_argument("--json", action="store_true", help="print the state as one JSON object")
    central_args(p)

    def target_args(p: argparse.ArgumentParser) -> None:
        p.add_argument(
            "--instrument", metavar="N", help="the instrument (default: the config's instrument)"
        )
        p.add_argument("--check", metavar="C", help="only this check's alerts (default: all)")
        p.add_argument(
            "--subject",
            metavar="S",
            help="only alerts on this calibrant, expected ion or metric path (default: all)",
        )

    def by_arg(p: argparse.ArgumentParser) -> None:
        p.add_argument("--by", metavar="NAME", help="who (default: your login name)")

    p = command(
        "ack",
        "acknowledge open alerts: no reminders at this severity; a worse state and the "
        "recovery are still sent",
    )
    config_arg(p, required=True)
    target_args(p)
    by_arg(p)
    p.add_argument("--note", metavar="TEXT", help="what you are doing about it")

    p = command("silence", "no alert messages for a while (runs are still judged and recorded)")
    silence = p.add_subparsers(dest="silence_command", required=True, metavar="ACTION")
    q = silence.add_parser("add", help="start a silence now")
    config_arg(q, required=True)
    target_args(q)
    by_arg(q)
    when = q.add_mutually_exclusive_group(required=True)
    when.add_argument("--for", dest="for_", metavar="DURATION", help="e.g. 30min, 4h, 1h30min")
    when.add_argument(
        "--until",
        metavar="TIME",
        help='instrument time: 08:00 (the next one) or "YYYY-MM-DD HH:MM"',
    )
    q.add_argument("--reason", required=True, metavar="TEXT", help="why (shown in every summary)")
    q = silence.add_parser("list", help="silences in force or still to come")
    config_arg(q, required=True)
    q.add_argument("--instrument", metavar="N", help="the instrument (default: the config's)")
    q.add_argument("--all", action="store_true", help="also those that are over")
    q.add_argument("--json", action="store_true", help="print the silences as JSON")
    q = silence.add_parser("end", help="end a silence now; what is still open is sent once")
    q.add_argument("id", type=int, metavar="ID")
    config_arg(q, required=True)
    q.add_argument("--instrument", metavar="N", help="the instrument (default: the config's)")

    p = command(
        "note", "record an event (column replaced, source cleaned...): marked on the digest charts"
    )
    p.add_argument("text", metavar="TEXT", help="what happened")
    config_arg(p, required=True)
    p.add_argument("--kind", choices=NOTE_KINDS, default="other", help="default: other")
    p.add_argument(
        "--at", metavar="TIME", help='instrument time: 14:30 or "YYYY-MM-DD HH:MM" (default: now)'
    )
    p.add_argument(
        "--reset-baselines",
        action="store_true",
        help="baselines, Westgard/EWMA/CUSUM and forecasts start again from the runs after it",
    )
    p.add_argument("--instrument", metavar="N", help="the instrument (default: the config's)")
    by_arg(p)

    p = command("serve", "the read-only floor page: every instrument's status, runs and charts")
    p.add_argument(
        "-c",
        "--config",
        required=True,
        action="append",
        metavar="CONFIG",
        help="an instrument's lab config (YAML); repeat for each instrument on the page",
    )
    p.add_argument(
        "--all",
        action="store_true",
        help="every instrument in the central store of the first config's central.url "
        "(the configs given add their checks' limit lines)",
    )
    p.add_argument(
        "--listen", metavar="HOST:PORT", help="address to serve on (default: serve.listen)"
    )

    p = command("demo", "the whole pipeline on the bundled demo runs")
    p.add_argument("--notify-url", metavar="URL", help="also send the alerts to this apprise URL")
    p.add_argument("--workdir", metavar="DIR", help="keep the demo's folders here")
    p.add_argument("--fast", action="store_true", help="no pauses between arriving runs")
    p.add_argument(
        "--facility",
        action="store_true",
        help="three instruments publishing to a throwaway PostgreSQL central store",
    )
    return parser


def central_args(p: argparse.ArgumentParser) -> None:
    """``--all`` / ``--instrument NAME``: read the central store (``central.url``)."""
    which = p.add_mutually_exclusive_group()
    which.add_argument(
        "--all", action="store_true", help="every instrument in the central store (central.url)"
    )
    which.add_argument("--instrument", metavar="NAME", help="one instrument of the central store")


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
        import logging

        from watcher.cli import clilog

        clilog.configure(logging.INFO if args.verbose else logging.WARNING)
    # Imported after parsing: ``--help`` and usage errors need none of the program's modules.
    from watcher.errors import (
        ConfigError,
        DaemonRunningError,
        IonwardenError,
        StoreCorruptError,
        StoreTooNewError,
    )

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
