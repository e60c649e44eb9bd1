"""``ionwarden serve -c CONFIG [-c CONFIG ...] [--listen HOST:PORT]``: the read-only floor page.

Each config is one instrument: its ``instrument.name``, checks and time zone, and its
``state_dir`` store, read-only (``watcher.view.sqlite_source``); give one ``-c`` per instrument
to put several on one page. ``serve.listen``, ``serve.token`` and ``serve.refresh_s`` come from
the first config; ``--listen`` overrides the address. Bound to anything but a loopback address
it refuses to start without ``serve.token`` (exit 2). It serves with uvicorn on a socket it
binds itself, so a port in use is one clear line (exit 3), not a traceback.

Exit codes: 0 stopped (SIGTERM), 2 bad config, bad --listen, a missing token, or two configs
naming the same instrument, 3 the address cannot be bound, 130 Ctrl-C.
"""

from __future__ import annotations

import signal
import socket
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

from watcher.cli.exitcodes import ExitCode
from watcher.config import load, state_dir_of
from watcher.errors import ConfigError

if TYPE_CHECKING:
    import argparse
    from types import FrameType

    from watcher.config import Listen


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
    try:
        source = MultiSource([SqliteFloorSource(c, state_dir_of(c)) for c in configs])
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
    names = ", ".join(source.names())
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
