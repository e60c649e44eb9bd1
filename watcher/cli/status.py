"""``ionwarden status -c CONFIG [--json]``: the daemon's state — last runs, open alerts, outbox.

Read-only: opens the state database with ``mode=ro`` and writes nothing. URLs appear only as
apprise masks them. Exit 1 when alerts are open or messages are undelivered (pending, or
abandoned within the last day), 0 otherwise, 3 when there is no state database yet.
"""

from __future__ import annotations

import json
import sys
import time
from datetime import datetime
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

from watcher.cli.exitcodes import ExitCode
from watcher.config import Config, load, state_dir_of
from watcher.errors import StoreError
from watcher.records import printable

if TYPE_CHECKING:
    import argparse
    from pathlib import Path

RECENT_ABANDONED_S = 24 * 3600.0
LAST_RUNS = 10


def collect(config: Config, state_dir: Path, *, now_s: float) -> dict[str, Any]:
    """Everything ``status`` shows, as plain data (the ``--json`` shape)."""
    from watcher.notify.deliver import masked_url
    from watcher.store import db, history, outbox

    conn = db.connect(state_dir, readonly=True)
    try:
        with db.read(conn):
            runs = history.recent_runs(conn, limit=LAST_RUNS)
            alerts = outbox.load_alerts(conn)
            waiting = outbox.messages(
                conn, statuses=(outbox.DeliveryStatus.PENDING, outbox.DeliveryStatus.ABANDONED)
            )
    finally:
        conn.close()
    masks = {c.name: masked_url(c, config.alerts) for c in config.alerts.channels}
    tz = ZoneInfo(config.instrument.timezone)

    def local(epoch_s: float | None) -> str | None:
        if epoch_s is None:
            return None
        return datetime.fromtimestamp(epoch_s, tz).isoformat(timespec="seconds")

    return {
        "state_dir": str(state_dir),
        "instrument": config.instrument.name,
        "last_runs": [
            {
                "run_id": r.run_id,
                "file": r.file_name,
                "judged_at": r.judged_at.astimezone(tz).isoformat(timespec="seconds"),
                "status": str(r.status),
                "findings": len(r.findings),
                "error": r.error,
            }
            for r in runs
        ],
        "open_alerts": [
            {
                "channel": a.channel,
                "check": a.check,
                "subject": a.subject,
                "severity": str(a.state.severity),
                "since": local(a.state.raised_at_s),
                "last_sent": local(a.state.last_sent_at_s),
                "run_file": a.run_file,
            }
            for a in alerts
        ],
        "undelivered": [
            {
                "message_id": m.message_id,
                "channel": m.channel,
                "url": masks.get(m.channel, "(channel no longer configured)"),
                "kind": m.kind,
                "title": m.title,
                "status": str(m.status),
                "attempts": m.attempts,
                "created": local(m.created_at_s),
                "next_attempt": local(m.next_attempt_at_s)
                if m.status is outbox.DeliveryStatus.PENDING
                else None,
                "last_error": m.last_error,
            }
            for m in waiting
            if m.status is outbox.DeliveryStatus.PENDING
            or now_s - (m.finished_at_s or m.created_at_s) <= RECENT_ABANDONED_S
        ],
    }


def render(state: dict[str, Any]) -> str:
    """The human view of ``collect()``."""
    lines = [f"{state['instrument']} (state: {state['state_dir']})", "", "last runs:"]
    if not state["last_runs"]:
        lines.append("  (none yet)")
    for r in state["last_runs"]:
        extra = f"  {r['error']}" if r["error"] else ""
        lines.append(
            f"  {r['judged_at']}  {r['status']:<10} {r['file']}  findings {r['findings']}{extra}"
        )
    lines += ["", f"open alerts: {len(state['open_alerts'])}"]
    for a in state["open_alerts"]:
        lines.append(
            f"  [{a['channel']}] {a['severity']:<8} {a['check']} ({a['subject']}) "
            f"since {a['since']}"
        )
    lines += ["", f"undelivered messages: {len(state['undelivered'])}"]
    for m in state["undelivered"]:
        lines.append(
            f"  #{m['message_id']} [{m['channel']} {m['url']}] {m['status']} after "
            f"{m['attempts']} attempts: {m['title']}"
        )
        if m["last_error"]:
            lines.append(f"      last error: {m['last_error']}")
    # File names, errors and titles come from outside: one escaped line each on the terminal.
    return "\n".join(printable(line) for line in lines)


def main(args: argparse.Namespace) -> int:
    """Print the state; exit 1 when something needs attention (see the module docstring)."""
    config = load(args.config)
    state_dir = state_dir_of(config)
    try:
        state = collect(config, state_dir, now_s=time.time())
    except StoreError as exc:
        sys.stderr.write(f"ionwarden status: {exc}\n")
        return ExitCode.RUNTIME
    if args.json:
        sys.stdout.write(json.dumps(state, indent=2) + "\n")
    else:
        sys.stdout.write(render(state) + "\n")
    needs_attention = bool(state["open_alerts"] or state["undelivered"])
    return ExitCode.ATTENTION if needs_attention else ExitCode.OK
