"""``ionwarden serve -c CONFIG [-c CONFIG ...] [--all] [--listen HOST:PORT]``: the read-only
floor page.

Each config is one instrument: its ``instrument.name``, checks and time zone, and its
``state_dir`` store, read-only (``watcher.view.sqlite_source``); give one ``-c`` per instrument
to put several on one page. With ``--all`` the page shows every instrument in the central store
named by the first config's ``central.url`` instead (``watcher.view.central_source``); the
configs given lend their instruments' checks (the charts' limit lines) and time zones.
``serve.listen``, ``serve.token`` and ``serve.refresh_s`` come from
the first config; ``--listen`` overrides the address. Bound to anything but a loopback address
it refuses to start without ``serve.token`` (exit 2). It serves with uvicorn on a socket it
binds itself, so a port in use is one clear line (exit 3), not a traceback.

Exit codes: 0 stopped (SIGTERM), 2 bad config, bad --listen, a missing token, two configs
naming the same instrument, or --all without central.url, 3 the address cannot be bound or
(--all) the central store cannot be read, 130 Ctrl-C.
"""

from __future__ import annotations

import signal
import socket
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

from watcher.cli.exitcodes import ExitCode
from watcher.config import load, state_dir_of
from watcher.errors import ConfigError, StoreError

if TYPE_CHECKING:
    import argparse
    from types import FrameType

    from watcher.config import Config, Listen
    from watcher.view.source import FloorSource


class _Stopped(Exception):
    """SIGTERM arrived: a clean stop (exit 0)."""


def parse_listen(text: str) -> Listen:
    """``--listen`` as a config value would be read (ConfigError naming the option)."""
    from watcher.config.sections import listen_address
    from watcher.config.values import Bad, Values

    values = Values("--listen", {}, Path.cwd())
    try:
        return listen_address(values, ("listen",), text)
    except Bad:
        raise ConfigError(values.problems) from None


def bind(listen: Listen) -> socket.socket:
    family = socket.AF_INET6 if ":" in listen.host else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        sock.bind((listen.host, listen.port))
    except OSError:
        sock.close()
        raise
    sock.listen(128)
    sock.set_inheritable(True)
    return sock


def _central(configs: list[Config]) -> FloorSource:
    """Every instrument of the first config's central store (StoreError: not readable)."""
    from watcher.view.central_source import CentralFloorSource

    central = configs[0].central
    assert central.url is not None  # noqa: S101 - main checked it
    return CentralFloorSource(central.url, own=configs, connect_timeout_s=central.connect_timeout_s)


def main(args: argparse.Namespace) -> int:
    import uvicorn

    from watcher.view.app import build_app
    from watcher.view.source import MultiSource
    from watcher.view.sqlite_source import SqliteFloorSource

    configs = [load(path) for path in args.config]  # ConfigError -> exit 2 in cli.main
    first = configs[0]
    listen = parse_listen(args.listen) if args.listen else first.serve.listen
    token = first.serve.token
    if not listen.is_loopback and not token:
        sys.stderr.write(
            f"ionwarden serve: {args.config[0]}: serve.token is required to listen on {listen} "
            "(any address but 127.0.0.1, ::1 or localhost); put the page behind the lab's TLS "
            "reverse proxy as well\n"
        )
        return ExitCode.USAGE
    if getattr(args, "all", False) and first.central.url is None:
        sys.stderr.write(
            f"ionwarden serve: {args.config[0]}: central.url is not set (--all reads the "
            "central store)\n"
        )
        return ExitCode.USAGE
    try:
        source: FloorSource
        if getattr(args, "all", False):
            source = _central(configs)
        else:
            source = MultiSource([SqliteFloorSource(c, state_dir_of(c)) for c in configs])
    except StoreError as exc:
        sys.stderr.write(f"ionwarden serve: {exc}\n")
        return ExitCode.RUNTIME
    except ValueError as exc:
        sys.stderr.write(f"ionwarden serve: {exc}: give each instrument its own name\n")
        return ExitCode.USAGE
    try:
        sock = bind(listen)
    except OSError as exc:
        sys.stderr.write(f"ionwarden serve: cannot listen on {listen}: {exc.strerror or exc}\n")
        return ExitCode.RUNTIME
    app = build_app(source, token=token, refresh_s=first.serve.refresh_s)
    port = sock.getsockname()[1]
    host = f"[{listen.host}]" if ":" in listen.host else listen.host
    names = ", ".join(source.names()) or "no instruments yet"
    sys.stdout.write(f"ionwarden serve: http://{host}:{port}/ ({names}); Ctrl-C stops\n")
    sys.stdout.flush()

    def on_term(signum: int, frame: FrameType | None) -> Any:
        raise _Stopped

    # uvicorn handles SIGTERM/SIGINT itself, shuts down, then raises the signal again for the
    # handler that was there before: SIGTERM then ends here as a clean stop.
    signal.signal(signal.SIGTERM, on_term)
    server = uvicorn.Server(
        uvicorn.Config(app, log_level="warning", access_log=False, lifespan="off")
    )
    try:
        server.run(sockets=[sock])
    except _Stopped:
        return ExitCode.OK
    finally:
        sock.close()
    return ExitCode.OK
