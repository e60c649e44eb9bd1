"""sd_notify over a real datagram socket playing systemd: a path and an abstract name."""

from __future__ import annotations

import os
import socket
import uuid

from watcher.daemon.sdnotify import notify, watchdog_interval_s


def test_outside_systemd_returns_false():
    """Without $NOTIFY_SOCKET nothing is sent and the call says so."""
    assert notify("READY=1", env={}) is False


def test_path_socket_receives_message(tmp_path):
    """A path socket receives exactly the message (the protocol: one KEY=value datagram)."""
    path = tmp_path / "notify.sock"
    with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as server:
        server.bind(str(path))
        server.settimeout(2)
        assert notify("READY=1", env={"NOTIFY_SOCKET": str(path)}) is True
        assert server.recv(4096) == b"READY=1"


def test_abstract_socket_receives_message():
    """'@name' addresses the abstract namespace (a leading NUL byte), as systemd documents."""
    name = f"ionwarden-test-{uuid.uuid4().hex}"
    with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as server:
        server.bind(b"\0" + name.encode())
        server.settimeout(2)
        assert notify("STATUS=queued 3", env={"NOTIFY_SOCKET": "@" + name}) is True
        assert server.recv(4096) == b"STATUS=queued 3"


def test_unreachable_socket_returns_false(tmp_path):
    """A socket path nobody listens on gives False, never an exception."""
    assert notify("WATCHDOG=1", env={"NOTIFY_SOCKET": str(tmp_path / "none.sock")}) is False


def test_full_receiver_never_blocks(tmp_path):
    """A receiver that stops reading (its datagram queue full) gets False, and the call returns."""
    path = tmp_path / "full.sock"
    with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as server:
        server.bind(str(path))
        env = {"NOTIFY_SOCKET": str(path)}
        results = [notify("STATUS=x" * 100, env=env) for _ in range(2000)]
    assert results[0] is True
    assert results[-1] is False


def test_watchdog_interval_is_half_the_period():
    """Ping at half of WATCHDOG_USEC, and only when WATCHDOG_PID is this process."""
    assert watchdog_interval_s({"WATCHDOG_USEC": "60000000"}) == 30.0
    env = {"WATCHDOG_USEC": "2000000", "WATCHDOG_PID": str(os.getpid())}
    assert watchdog_interval_s(env) == 1.0
    assert watchdog_interval_s({"WATCHDOG_USEC": "2000000", "WATCHDOG_PID": "1"}) is None
    assert watchdog_interval_s({}) is None


def test_a_value_with_newlines_stays_one_assignment(tmp_path):
    """sd_notify(3) reads newline-separated assignments: a run name with '\\nWATCHDOG=trigger'
    in STATUS= arrives as one STATUS line with the newlines escaped."""
    path = tmp_path / "notify.sock"
    with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as server:
        server.bind(str(path))
        server.settimeout(2)
        message = "STATUS=last run inj\nWATCHDOG=trigger\nMAINPID=1\nx\x1b[31m.mzML"
        assert notify(message, env={"NOTIFY_SOCKET": str(path)}) is True
        assert server.recv(4096) == (
            b"STATUS=last run inj\\nWATCHDOG=trigger\\nMAINPID=1\\nx\\x1b[31m.mzML"
        )
