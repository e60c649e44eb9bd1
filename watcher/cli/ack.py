"""``ionwarden ack``: a person has seen an open alert; no more reminders at that severity.

The alert still escalates (a worse run sends again, and the acknowledgement lapses) and still
clears with a message. Every channel's copy of the alert is acknowledged. The daemon writes the
acknowledgement to the health log within a second; ``status`` and the digest show it.
Exit 0 done, 5 no open alert matches (or no such check/instrument), 3 no state yet.
"""

from __future__ import annotations

import sys
import time
from typing import TYPE_CHECKING

from watcher.cli.controlled import Refused, check_of, instrument_of, open_store, refuse, who
from watcher.cli.exitcodes import ExitCode
from watcher.config import load
from watcher.records import printable

if TYPE_CHECKING:
    import argparse
    import sqlite3

    from watcher.config import Config


def acknowledge(
    conn: sqlite3.Connection,
    config: Config,
    *,
    instrument: str,
    check: str | None,
    subject: str | None,
    by: str,
    note: str | None,
    now_s: float,
) -> list[tuple[str, str, str]]:
    """Acknowledge the matching open alerts in one transaction; returns (check, subject,
    severity) of each. Raises Refused when none matches."""
    from watcher.notify import alert_state as machine
    from watcher.notify.quiet import subject_matches
    from watcher.store import controls, db, outbox

    done: dict[tuple[str, str], str] = {}
    with db.write(conn):
        for alert in outbox.load_alerts(conn, instrument=instrument):
            if check is not None and alert.check != check:
                continue
            if subject is not None and not subject_matches(subject, alert.subject):
                continue
            outbox.save_alert(
                conn,
                instrument=instrument,
                check=alert.check,
                subject=alert.subject,
                channel=alert.channel,
                state=machine.acknowledge(alert.state, now_s),
                run_file=None,
            )
            key = (alert.check, alert.subject)
            if key in done:
                continue
            done[key] = str(alert.state.severity)
            controls.add_ack(
                conn,
                at_s=now_s,
                instrument=instrument,
                check=alert.check,
                subject=alert.subject,
                severity=alert.state.severity,
                raised_at_s=alert.state.raised_at_s,
                by=by,
                note=note,
                run_file=alert.run_file,
            )
            controls.log_entry(
                conn,
                "alert.acknowledged",
                now_s,
                check=alert.check,
                subject=alert.subject,
                severity=str(alert.state.severity),
                by=by,
                note=note,
            )
        if not done:
            what = " ".join(
                part
                for part in (
                    f"for check {check!r}" if check else "",
                    f"on subject {subject!r}" if subject else "",
                )
                if part
            )
            raise Refused(f"no open alert of {instrument!r} {what}".rstrip() + " to acknowledge")
    return [(c, s, sev) for (c, s), sev in done.items()]


def main(args: argparse.Namespace) -> int:
    config = load(args.config)
    try:
        instrument = instrument_of(config, args.instrument)
        check = check_of(config, args.check)
        conn = open_store(config, must_exist=True)
        try:
            done = acknowledge(
                conn,
                config,
                instrument=instrument,
                check=check,
                subject=args.subject,
                by=who(args.by),
                note=args.note,
                now_s=time.time(),
            )
        finally:
            conn.close()
    except Refused as exc:
        return refuse("ack", exc)
    for check_name, subject, severity in done:
        sys.stdout.write(printable(f"acknowledged: {check_name}, {subject} ({severity})") + "\n")
    return ExitCode.OK
