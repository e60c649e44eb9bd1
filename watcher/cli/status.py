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
from watcher.records import printable, shown

if TYPE_CHECKING:
    import argparse
    from pathlib import Path

RECENT_ABANDONED_S = 24 * 3600.0
LAST_RUNS = 10


def collect(config: Config, state_dir: Path, *, now_s: float) -> dict[str, Any]:
    """Everything ``status`` shows, as plain data (the ``--json`` shape)."""
    from watcher.notify.deliver import masked_url
    from watcher.store import db, history, jobs, outbox

    conn = db.connect(state_dir, readonly=True)
    try:
        with db.read(conn):
            runs = history.recent_runs(conn, limit=LAST_RUNS)
            files = jobs.recent(conn, limit=LAST_RUNS)
            alerts = outbox.load_alerts(conn)
            waiting_text = jobs.get_state(conn, "intake.waiting")
            waiting = outbox.messages(
                conn, statuses=(outbox.DeliveryStatus.PENDING, outbox.DeliveryStatus.ABANDONED)
            )
            queued = _central_queue(conn) if config.central.url is not None else None
            people = _people(conn, config, now_s, runs)
    finally:
        conn.close()
    masks = {c.name: masked_url(c, config.alerts) for c in config.alerts.channels}
    tz = ZoneInfo(config.instrument.timezone)

    def local(epoch_s: float | None) -> str | None:
        if epoch_s is None:
            return None
        return datetime.fromtimestamp(epoch_s, tz).isoformat(timespec="seconds")

    central: dict[str, Any] | None = None
    if queued is not None and config.central.url is not None:
        from watcher.central.url import masked

        central = {
            "url": masked(config.central.url),
            "waiting": queued[0],
            "oldest_queued": local(queued[1]),
        }
    state = {
        "state_dir": str(state_dir),
        "instrument": config.instrument.name,
        # entries not yet in the central store (central.url set), else None
        "central": central,
        "last_runs": [
            {
                "run_id": r.run_id,
                "file": shown(r.file_name),
                "judged_at": r.judged_at.astimezone(tz).isoformat(timespec="seconds"),
                "status": str(r.status),
                "findings": len(r.findings),
                "error": r.error,
            }
            for r in runs
        ],
        # Every file that arrived, judged or not: a copy of a judged run has no run of its own
        # (and no alert, by design), so this is where an operator sees that it came.
        "recent_files": [
            {
                "file": shown(job.path.name),
                "state": str(job.state),
                "outcome": None if job.outcome is None else shown(job.outcome),
                "seen": local(job.first_seen_s),
                "note": None if twin is None else f"duplicate of {shown(twin.name)}",
            }
            for job, twin in files
        ],
        "open_problems": _open_problems(alerts, local),
        "waiting_files": _waiting(waiting_text, now_s),
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
    return _with_people(state, people, alerts, local)


def _people(conn: Any, config: Config, now_s: float, runs: list[Any]) -> dict[str, Any]:
    """Acknowledgements, the silences and maintenance windows in force, and which of the last
    runs were judged while their alerts were held back (still judged, recorded and shown)."""
    from watcher.notify import quiet
    from watcher.store import controls

    instrument = config.instrument.name
    acks = controls.acks(conn, instrument=instrument)
    all_silences = controls.silences(conn, instrument=instrument)
    periods = [quiet.silence_period(s) for s in all_silences]
    if runs:
        oldest = min(r.judged_at.timestamp() for r in runs)
        periods += quiet.maintenance_periods(config, oldest, now_s + 1)
    else:
        periods += quiet.maintenance_periods(config, now_s, now_s + 1)

    def keys(run: Any) -> list[tuple[str, str]]:
        # an unreadable run's alert is the pseudo-check "unreadable" on subject "file"
        found = [(f.check, f.subject) for f in run.findings]
        return [*found, ("unreadable", "file")] if str(run.status) == "unreadable" else found

    silenced_runs = {
        r.run_id
        for r in runs
        if any(p.covers(c, s, r.judged_at.timestamp()) for c, s in keys(r) for p in periods)
    }
    active = [p for p in periods if p.start_s <= now_s < p.end_s]
    return {"acks": acks, "active": active, "silenced_runs": silenced_runs}


def _with_people(
    state: dict[str, Any], people: dict[str, Any], alerts: list[Any], local: Any
) -> dict[str, Any]:
    from watcher.store import controls

    acked: dict[tuple[str, str], str] = {}
    for a in alerts:
        if a.state.acked_at_s is None:
            continue
        ack = controls.ack_of(people["acks"], a.check, a.subject, a.state.raised_at_s)
        if ack is not None:
            note = f": {ack.note}" if ack.note else ""
            acked[(a.check, a.subject)] = f"acknowledged by {ack.by} at {local(ack.at_s)}{note}"
    by_key = {(a.check, a.subject): a for a in alerts}
    for problem, key in zip(state["open_problems"], list(dict.fromkeys(by_key)), strict=False):
        problem["acknowledged"] = acked.get(key)
    for entry in state["open_alerts"]:
        entry["acknowledged"] = acked.get((entry["check"], entry["subject"]))
    for run in state["last_runs"]:
        run["silenced"] = run["run_id"] in people["silenced_runs"]
    state["quiet_now"] = [
        {
            "source": p.source,
            "until": local(p.end_s),
            "reason": p.reason,
            "scope": ", ".join(p.checks) or (p.subject or "every alert"),
        }
        for p in people["active"]
    ]
    return state


def _central_queue(conn: Any) -> tuple[int, float | None]:
    """Entries waiting for the central store, and when the oldest was queued."""
    from watcher.central import queue

    return queue.length(conn), queue.oldest_queued_s(conn)


def _open_problems(alerts: list[Any], local: Any) -> list[dict[str, Any]]:
    """One entry per open (check, subject), whichever channels hold it: what, how bad, since
    when, the run that raised it, and the value it was at."""
    from watcher.notify.alert_text import subject_words, value_words

    merged: dict[tuple[str, str], dict[str, Any]] = {}
    for a in alerts:
        key = (a.check, a.subject)
        finding = a.state.finding
        entry = merged.get(key)
        if entry is None:
            entry = merged[key] = {
                "check": a.check,
                "subject": subject_words(a.subject) if "." in a.subject else a.subject,
                "severity": str(a.state.severity),
                "value": value_words(finding.metric, finding.value),
                "since": local(a.state.raised_at_s),
                "since_s": a.state.raised_at_s,
                "run_file": None if a.run_file is None else shown(a.run_file),
                "channels": [],
            }
        entry["channels"].append(a.channel)
        if a.state.raised_at_s < entry["since_s"]:
            entry["since"], entry["since_s"] = local(a.state.raised_at_s), a.state.raised_at_s
    return [{k: v for k, v in e.items() if k != "since_s"} for e in merged.values()]


def _waiting(text: str | None, now_s: float) -> list[dict[str, Any]]:
    """The daemon's list of files still settling, with ages in seconds from now."""
    if not text:
        return []
    try:
        items = json.loads(text)
    except ValueError:
        return []
    return [
        {
            "file": shown(str(i.get("file", "?"))),
            "size": i.get("size"),
            "why": str(i.get("why", "settling")),
            "unchanged_s": max(0.0, now_s - float(i.get("last_change_s", now_s))),
            "seen_s": max(0.0, now_s - float(i.get("first_seen_s", now_s))),
        }
        for i in items
        if isinstance(i, dict)
    ]


def _age(seconds: float) -> str:
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def render(state: dict[str, Any]) -> str:
    """The human view of ``collect()``."""
    lines = [f"{state['instrument']} (state: {state['state_dir']})", "", "last runs:"]
    if not state["last_runs"]:
        lines.append("  (none yet)")
    for r in state["last_runs"]:
        extra = f"  {r['error']}" if r["error"] else ""
        extra += "  (silenced)" if r.get("silenced") else ""
        lines.append(
            f"  {r['judged_at']}  {r['status']:<10} {r['file']}  findings {r['findings']}{extra}"
        )
    lines += ["", "recent files:"]
    if not state["recent_files"]:
        lines.append("  (none yet)")
    for f in state["recent_files"]:
        what = f["note"] or f["outcome"] or f["state"]
        lines.append(f"  {f['seen']}  {f['file']}  {what}")
    lines += ["", "waiting files:"]
    if not state["waiting_files"]:
        lines.append("  (none)")
    for w in state["waiting_files"]:
        lines.append(
            f"  {w['file']}  {w['why']}, unchanged for {_age(w['unchanged_s'])}"
            f" (seen {_age(w['seen_s'])} ago)"
        )
    lines += ["", f"open problems: {len(state['open_problems'])}"]
    for p in state["open_problems"]:
        run = f", {p['run_file']}" if p["run_file"] else ""
        lines.append(
            f"  {p['severity']:<8} {p['check']}, {p['subject']}: {p['value']} since {p['since']}"
            f"{run} [{', '.join(p['channels'])}]"
        )
        if p.get("acknowledged"):
            lines.append(f"           {p['acknowledged']}: no reminders at this severity")
    if state.get("quiet_now"):
        lines += ["", "quiet now (alerts held back, runs still judged):"]
        for q in state["quiet_now"]:
            lines.append(f"  {q['source']}: {q['scope']} until {q['until']}, {q['reason']}")
    central = state.get("central")
    if central is not None:
        behind = f" (oldest queued {central['oldest_queued']})" if central["waiting"] else ""
        lines += ["", f"central store {central['url']}: {central['waiting']} waiting{behind}"]
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
    if getattr(args, "all", False) or getattr(args, "instrument", None):
        from watcher.cli.central_view import status_main

        return status_main(config, args)
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
