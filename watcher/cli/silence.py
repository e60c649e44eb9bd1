"""``ionwarden silence add|list|end``: no alert message for a while; runs still judged.

While a silence is in force every run is still measured, judged, recorded and shown (marked
silenced in ``status`` and the digest); the alerts it covers reach no channel. When it ends
(its time is up, or ``silence end ID``), the daemon sends each alert still open once, in one
message per channel, listing those that opened and cleared meanwhile. ``--for`` is real time
(four hours are four hours across a DST change); ``--until 08:00`` is the next 08:00 on the
instrument's clock. Exit 0 done, 5 no such silence/check/subject/instrument, 2 bad time.
"""

from __future__ import annotations

import json
import sys
import time
from datetime import datetime
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

from watcher.cli.controlled import (
    Refused,
    check_of,
    instrument_of,
    open_store,
    refuse,
    subject_of_config,
    who,
)
from watcher.cli.exitcodes import ExitCode
from watcher.config import load
from watcher.records import printable

if TYPE_CHECKING:
    import argparse

    from watcher.config import Config
    from watcher.store.controls import Silence


def _local(epoch_s: float, timezone: str) -> str:
    return datetime.fromtimestamp(epoch_s, ZoneInfo(timezone)).strftime("%Y-%m-%d %H:%M %Z")


def describe(s: Silence, timezone: str, now_s: float) -> dict[str, Any]:
    scope = (
        "every alert"
        if s.check is None and s.subject is None
        else ", ".join(
            part
            for part in (s.check and f"check {s.check}", s.subject and f"subject {s.subject}")
            if part
        )
    )
    if s.end_s <= now_s:
        state = "ended early" if s.ended_early_s is not None else "over"
    elif s.start_s > now_s:
        state = "later"
    else:
        state = "in force"
    return {
        "id": s.silence_id,
        "instrument": s.instrument,
        "scope": scope,
        "check": s.check,
        "subject": s.subject,
        "reason": s.reason,
        "by": s.by,
        "from": _local(s.start_s, timezone),
        "until": _local(s.end_s, timezone),
        "state": state,
    }


def _add(args: argparse.Namespace, config: Config, now_s: float) -> int:
    from watcher.notify import quiet
    from watcher.store import controls, db

    instrument = instrument_of(config, args.instrument)
    check = check_of(config, args.check)
    subject = subject_of_config(config, args.subject)
    tz_name = config.instrument.timezone
    try:
        if args.for_ is not None:
            end_s = now_s + quiet.parse_for(args.for_)
        else:
            end_s = quiet.parse_until(args.until, now_s, tz_name)
    except ValueError as exc:
        sys.stderr.write(f"ionwarden silence add: {exc}\n")
        return ExitCode.USAGE
    by = who(args.by)
    conn = open_store(config, must_exist=False)
    try:
        with db.write(conn):
            silence_id = controls.add_silence(
                conn,
                instrument=instrument,
                check=check,
                subject=subject,
                reason=args.reason,
                by=by,
                start_s=now_s,
                end_s=end_s,
            )
            controls.log_entry(
                conn,
                "silence.added",
                now_s,
                silence_id=silence_id,
                check=check,
                subject=subject,
                reason=args.reason,
                by=by,
                until=_local(end_s, tz_name),
            )
            silence = controls.get_silence(conn, silence_id)
    finally:
        conn.close()
    assert silence is not None  # noqa: S101 - written in the transaction above
    d = describe(silence, tz_name, now_s)
    sys.stdout.write(
        printable(f"silence {silence_id}: {d['scope']} of {instrument} quiet until {d['until']}")
        + f"\nend it early with: ionwarden silence end {silence_id} -c {args.config}\n"
    )
    return ExitCode.OK


def _list(args: argparse.Namespace, config: Config, now_s: float) -> int:
    from watcher.config import state_dir_of
    from watcher.store import controls, db

    instrument = instrument_of(config, args.instrument)
    found: list[Silence] = []
    if (state_dir_of(config) / db.DB_NAME).exists():  # a listing creates no store
        conn = open_store(config, must_exist=True)
        try:
            with db.read(conn):
                found = controls.silences(conn, instrument=instrument)
        finally:
            conn.close()
    rows = [describe(s, config.instrument.timezone, now_s) for s in found]
    if not args.all:
        rows = [r for r in rows if r["state"] in ("in force", "later")]
    if args.json:
        sys.stdout.write(json.dumps({"silences": rows}, indent=2) + "\n")
        return ExitCode.OK
    if not rows:
        sys.stdout.write("no silence in force\n")
    for r in rows:
        sys.stdout.write(
            printable(
                f"#{r['id']} {r['state']}: {r['scope']}, {r['from']} to {r['until']}, "
                f"{r['reason']} ({r['by']})"
            )
            + "\n"
        )
    return ExitCode.OK


def _end(args: argparse.Namespace, config: Config, now_s: float) -> int:
    from watcher.store import controls, db

    instrument = instrument_of(config, args.instrument)
    conn = open_store(config, must_exist=True)
    try:
        with db.write(conn):
            silence = controls.get_silence(conn, args.id)
            if silence is None or silence.instrument != instrument:
                raise Refused(f"no silence #{args.id} for {instrument!r} (see: silence list)")
            if silence.end_s <= now_s:
                raise Refused(f"silence #{args.id} is over already")
            controls.end_silence(conn, args.id, now_s)
    finally:
        conn.close()
    sys.stdout.write(f"silence {args.id} ended; the daemon sends what is still open\n")
    return ExitCode.OK


def main(args: argparse.Namespace) -> int:
    config = load(args.config)
    now_s = time.time()
    action = {"add": _add, "list": _list, "end": _end}[args.silence_command]
    try:
        return action(args, config, now_s)
    except Refused as exc:
        return refuse(f"silence {args.silence_command}", exc)
