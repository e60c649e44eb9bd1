"""structlog set-up for the daemon and the CLI, and the list of stable event names.

Event names are ``noun.past_verb``. Every name the code logs must be in ``EVENTS`` (a test greps
the package for ``log.<level>("...")`` calls and checks them against this list).

Daemon: human console on stderr when it is a TTY, JSON lines otherwise (journald), plus the
rotating JSON-lines file written only by the daemon. CLI commands: console on stderr only.
"""

from __future__ import annotations

EVENTS: frozenset[str] = frozenset(
    {
        # intake
        "run.detected",
        "run.settled",
        "run.incomplete",
        "run.queued",
        # measure / judge
        "run.measured",
        "run.unreadable",
        "run.judged",
        # daemon life
        "daemon.started",
        "daemon.ready",
        "daemon.stopping",
        "daemon.stopped",
        "config.reloaded",
        "config.rejected",
        "scan.completed",
        "heartbeat.missed",
        "heartbeat.resumed",
        # notify
        "alert.raised",
        "alert.cleared",
        "message.queued",
        "message.delivered",
        "message.failed",
        "message.abandoned",
        "digest.written",
        "digest.sent",
    }
)
