"""The daemon's metrics endpoint (``metrics.listen``): started beside the main loop, never in it.

A port that cannot be bound (in use, no permission) is logged as ``metrics.failed`` and the
daemon goes on judging and alerting without it: a missing endpoint shows in Prometheus as a
target that is down, while a daemon that refused to start would stop the alerts as well.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import structlog

from watcher.view.metrics import MetricsServer
from watcher.view.sqlite_source import SqliteFloorSource

if TYPE_CHECKING:
    from pathlib import Path

    from watcher.config import Config

log = structlog.get_logger("watcher.daemon")


def start_endpoint(config: Config, state_dir: Path) -> MetricsServer | None:
    """Serve the store's numbers on ``config.metrics.listen``; None when off or not bound."""
    listen = config.metrics.listen
    if listen is None:
        return None
    server = MetricsServer(SqliteFloorSource(config, state_dir), listen)
    try:
        server.start()
    except OSError as exc:
        log.error("metrics.failed", listen=str(listen), error=exc.strerror or str(exc))
        return None
    log.info("metrics.listening", listen=str(listen), path="/metrics")
    return server


def stop_endpoint(server: MetricsServer | None) -> None:
    if server is not None:
        server.stop()
