"""The systemd notify protocol, hand-written: one datagram to $NOTIFY_SOCKET per message.

No dependency: the protocol is a single ``sendto`` of ``KEY=value`` lines on a Unix datagram
socket, given as a path or, with a leading ``@``, in the abstract namespace. Outside systemd
(no $NOTIFY_SOCKET) every call returns False and does nothing, so callers need no checks.
"""

from __future__ import annotations

import os
import socket

from watcher.records import printable


def notify(message: str, *, env: dict[str, str] | None = None) -> bool:
    """Send one ``KEY=value`` (e.g. ``READY=1`` or ``STATUS=...``); True when systemd received it.

    Returns False when not started by systemd, or when the socket cannot be reached: a failed
    status update must never stop the daemon.
    """
    # One assignment per call: a newline in a value (a run file's name in STATUS=) would start a
    # second command such as WATCHDOG=trigger or MAINPID=, so control characters are escaped.
    message = printable(message)
    address = (env if env is not None else os.environ).get("NOTIFY_SOCKET", "")
    if not address:
        return False
    if address.startswith("@"):
        # Abstract namespace: the name starts with a NUL byte instead of "@".
        target: str | bytes = b"\0" + address[1:].encode()
    elif address.startswith("/"):
        target = address
    else:
        return False  # vsock and other address kinds are not used here
    try:
        with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM | socket.SOCK_CLOEXEC) as sock:
            # Never block: a receiver whose queue is full (max_dgram_qlen, 10 by default) would
            # otherwise stall the main loop inside a status update.
            sock.sendto(message.encode(), socket.MSG_DONTWAIT, target)
    except OSError:
        return False
    return True


def watchdog_interval_s(env: dict[str, str] | None = None) -> float | None:
    """Half of systemd's WATCHDOG_USEC (ping twice per period), or None when no watchdog is set.

    WATCHDOG_PID, when present, must be this process: a child must not ping for its parent.
    """
    values = env if env is not None else os.environ
    usec = values.get("WATCHDOG_USEC", "")
    pid = values.get("WATCHDOG_PID", "")
    if not usec.isdigit() or int(usec) <= 0:
        return None
    if pid and pid.isdigit() and int(pid) != os.getpid():
        return None
    return int(usec) / 1e6 / 2.0
