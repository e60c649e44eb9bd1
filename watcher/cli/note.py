"""``ionwarden note TEXT``: an event on the record (column replaced, source cleaned, ...).

Events are drawn as labelled vertical marks on the digest's charts and listed in the digest.
With ``--reset-baselines`` (or a kind named in the config's ``reset_baselines_on``) the rules
start again from the runs acquired after the event: baselines, Westgard rules, EWMA and CUSUM,
and drift forecasts no longer mix the old column with the new one. ``--at`` is the instrument's
local time (``14:30`` today, or ``2026-12-03 14:30``), default now.
Exit 0 recorded, 5 no such instrument, 2 a bad time.
"""

from __future__ import annotations

import sys
import time
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

from watcher.cli.controlled import Refused, instrument_of, open_store, refuse, who
from watcher.cli.exitcodes import ExitCode
from watcher.config import load
from watcher.records import printable

if TYPE_CHECKING:
    import argparse


def parse_at(text: str | None, now_s: float, timezone: str) -> datetime:
    """The event's time (aware UTC): now, ``HH:MM`` (the latest one not after now), or a local
    ``YYYY-MM-DD HH:MM``; an ISO time with an offset is taken as written.

    Raises:
        ValueError: another form, or a time in the future.
    """
    from watcher.config.maintenance import parse_local
    from watcher.notify.quiet import local_epoch

    tz = ZoneInfo(timezone)
    if text is None:
        return datetime.fromtimestamp(now_s, UTC)
    text = text.strip()
    if len(text) <= 5 and ":" in text:
        hours, _, minutes = text.partition(":")
        if not (hours.isdigit() and minutes.isdigit()) or int(hours) > 23 or int(minutes) > 59:
            raise ValueError(f'--at: expected HH:MM or "YYYY-MM-DD HH:MM", got {text!r}')
        today = datetime.fromtimestamp(now_s, tz).date()
        naive = datetime.combine(today, datetime.min.time()).replace(
            hour=int(hours), minute=int(minutes)
        )
        at_s = local_epoch(naive, tz)
        if at_s > now_s:
            at_s = local_epoch(naive - timedelta(days=1), tz)
        return datetime.fromtimestamp(at_s, UTC)
    try:
        parsed = datetime.fromisoformat(text)
    except ValueError:
        try:
            parsed = parse_local(text)
        except ValueError as exc:
            raise ValueError(f'--at: expected HH:MM or "YYYY-MM-DD HH:MM", got {text!r}') from exc
    at_s = parsed.timestamp() if parsed.tzinfo is not None else local_epoch(parsed, tz)
    if at_s > now_s + 60:
        raise ValueError(f"--at: {text} is in the future; an event is recorded once it happened")
    return datetime.fromtimestamp(at_s, UTC)


def main(args: argparse.Namespace) -> int:
    from watcher.store import controls, db

    config = load(args.config)
    now_s = time.time()
    try:
        instrument = instrument_of(config, args.instrument)
        try:
            at = parse_at(args.at, now_s, config.instrument.timezone)
        except ValueError as exc:
            sys.stderr.write(f"ionwarden note: {exc}\n")
            return ExitCode.USAGE
        text = args.text.strip()
        if not text:
            raise Refused("the note is empty: say what happened", ExitCode.USAGE)
        reset = bool(args.reset_baselines) or args.kind in config.reset_baselines_on
        by = who(args.by)
        conn = open_store(config, must_exist=False)
        try:
            with db.write(conn):
                note_id = controls.add_note(
                    conn,
                    instrument=instrument,
                    at=at,
                    kind=args.kind,
                    text=text,
                    reset_baselines=reset,
                    by=by,
                    recorded_at_s=now_s,
                )
                controls.log_entry(
                    conn,
                    "note.recorded",
                    now_s,
                    note_id=note_id,
                    at=at.isoformat(),
                    note_kind=args.kind,
                    text=text,
                    reset_baselines=reset,
                    by=by,
                )
        finally:
            conn.close()
    except Refused as exc:
        return refuse("note", exc)
    local = at.astimezone(ZoneInfo(config.instrument.timezone)).strftime("%Y-%m-%d %H:%M %Z")
    line = f"event {note_id} recorded: {args.kind} at {local}: {text}"
    if reset:
        line += "; baselines and trends start again from the runs after it"
    sys.stdout.write(printable(line) + "\n")
    return ExitCode.OK
