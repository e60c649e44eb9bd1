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
        "run.requeued",
        "run.duplicate",
        "run.skipped",
        "run.link_skipped",
        "run.failed",
        "watch.network_folder",
        # measure / judge
        "run.converted",
        "run.measured",
        "run.unreadable",
        "run.judged",
        "child.killed",
        # daemon life
        "daemon.started",
        "daemon.ready",
        "daemon.stopping",
        "daemon.stopped",
        "daemon.failed",
        "config.reloaded",
        "config.rejected",
        "scan.completed",
        "store.pruned",
        "converted.pruned",
        "store.unwritable",
        "store.recovered",
        "store.prune_skipped",
        "state.lost",
        "heartbeat.missed",
        "heartbeat.resumed",
        "metrics.listening",
        "metrics.failed",
        # notify
        "alert.raised",
        "alert.cleared",
        "alert.escalated",
        "alert.reminded",
        "alert.held_back",
        "healthlog.pruned",
        "healthlog.write_failed",
        "healthlog.caught_up",
        "message.queued",
        "message.delivered",
        "message.failed",
        "message.abandoned",
        "digest.written",
        "digest.sent",
        # central store (watcher.central.publish)
        "central.started",
        "central.connected",
        "central.schema_upgraded",
        "central.unreachable",
        "central.caught_up",
        "central.scan_failed",
        "central.round_failed",
        "central.close_failed",
        "central.queue_failed",
    }
)

# The set-up below is appended after EVENTS; names are checked by tests/test_logs.py.
import logging  # noqa: E402
import logging.handlers  # noqa: E402
import sys  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any, TextIO  # noqa: E402

import structlog  # noqa: E402

from watcher.records import printable  # noqa: E402

LOG_FILE_NAME = "ionwarden.jsonl"

# Shared by structlog calls and, as foreign_pre_chain, by plain stdlib records (apprise, watchdog,
# warnings), so every line has the same keys: timestamp (UTC ISO-8601), level, logger, event.
_SHARED: list[Any] = [
    structlog.contextvars.merge_contextvars,
    structlog.stdlib.add_log_level,
    structlog.stdlib.add_logger_name,
    structlog.processors.TimeStamper(fmt="iso", utc=True),
]


def _printable_values(_logger: Any, _name: str, event_dict: dict[str, Any]) -> dict[str, Any]:
    """Control characters in logged text shown as escapes, for the console renderer.

    A run file's name is chosen by whoever exports it; on a terminal its ESC sequences would
    recolour or rewrite the screen and a newline would forge a log line. JSON lines need no such
    step (JSON escapes control characters itself). A traceback keeps its line breaks.
    """
    out: dict[str, Any] = {}
    for key, value in event_dict.items():
        if isinstance(value, str):
            if key == "exception":
                value = "\n".join(printable(line) for line in value.split("\n"))
            else:
                value = printable(value)
        elif isinstance(value, Path):
            value = printable(str(value))
        out[printable(str(key))] = value
    return out


def _formatter(renderer: Any) -> logging.Formatter:
    if isinstance(renderer, structlog.processors.JSONRenderer):
        steps = [structlog.processors.dict_tracebacks]
    else:
        steps = [structlog.processors.format_exc_info, _printable_values]  # type: ignore[list-item]
    return structlog.stdlib.ProcessorFormatter(
        foreign_pre_chain=_SHARED,
        processors=[structlog.stdlib.ProcessorFormatter.remove_processors_meta, *steps, renderer],
    )


def _stream_handler(stream: TextIO, *, json_off_tty: bool) -> logging.Handler:
    handler = logging.StreamHandler(stream)
    is_tty = hasattr(stream, "isatty") and stream.isatty()
    renderer: Any
    if is_tty or not json_off_tty:
        renderer = structlog.dev.ConsoleRenderer(colors=is_tty)
    else:
        renderer = structlog.processors.JSONRenderer()
    handler.setFormatter(_formatter(renderer))
    return handler


def _configure(handlers: list[logging.Handler], level: int, own_level: int | None = None) -> None:
    root = logging.getLogger()
    for old in list(root.handlers):
        root.removeHandler(old)
        old.close()
    for handler in handlers:
        root.addHandler(handler)
    root.setLevel(level)
    # ``-v`` on ``run`` lowers only ionwarden's own loggers to DEBUG: a library's debug lines
    # can carry what its callers must not log (urllib3 logs request paths, and some apprise
    # services keep their token in the path).
    logging.getLogger("watcher").setLevel(logging.NOTSET if own_level is None else own_level)
    # apprise logs URL passwords at TRACE and message bodies at DEBUG (docs/reliability.md item 4):
    # never below INFO. watchdog at WARNING keeps its overflow warning, which triggers a rescan.
    logging.getLogger("apprise").setLevel(logging.INFO)
    logging.getLogger("watchdog").setLevel(logging.WARNING)
    # Off then on: a second set-up in one process (tests, the demo) re-installs the hook even when
    # something restored warnings.showwarning in between.
    logging.captureWarnings(False)
    logging.captureWarnings(True)
    structlog.configure(
        processors=[
            structlog.stdlib.filter_by_level,
            *_SHARED,
            structlog.processors.StackInfoRenderer(),
            structlog.stdlib.ProcessorFormatter.wrap_for_formatter,
        ],
        logger_factory=structlog.stdlib.LoggerFactory(),
        wrapper_class=structlog.stdlib.BoundLogger,
        cache_logger_on_first_use=False,
    )


def configure_daemon(
    log_dir: Path,
    keep_days: int,
    *,
    stream: TextIO | None = None,
    when: str = "midnight",
    level: int = logging.INFO,
) -> Path:
    """Daemon logging: stderr (console on a TTY, JSON lines otherwise) + a rotating JSON-lines file.

    Only the daemon writes the rotating file: two processes rotating one file lose about half the
    lines (docs/reliability.md item 6). Rotation at UTC midnight keeps ``keep_days`` old files.

    ``level`` is ionwarden's own: INFO (every run judged, every message sent), or DEBUG for
    ``ionwarden -v run``; libraries stay at INFO and above either way.

    Returns:
        The path of the current log file, ``<log_dir>/ionwarden.jsonl``.
    """
    log_dir.mkdir(parents=True, exist_ok=True)
    path = log_dir / LOG_FILE_NAME
    file_handler = logging.handlers.TimedRotatingFileHandler(
        path, when=when, utc=True, backupCount=keep_days, delay=True, encoding="utf-8"
    )
    file_handler.setFormatter(_formatter(structlog.processors.JSONRenderer()))
    console = _stream_handler(stream if stream is not None else sys.stderr, json_off_tty=True)
    _configure([console, file_handler], logging.INFO, own_level=level)
    return path


def configure_cli(*, stream: TextIO | None = None, level: int = logging.WARNING) -> None:
    """CLI logging: console renderer on stderr only; CLI commands never touch the daemon's file."""
    _configure(
        [_stream_handler(stream if stream is not None else sys.stderr, json_off_tty=False)], level
    )
