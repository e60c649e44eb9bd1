"""``status`` and ``digest`` for the whole facility: ``--all`` instruments or ``--instrument NAME``,
read from the central store named by the config's ``central.url``.

Read-only on PostgreSQL (``watcher.central.reader``). The URL is shown masked, never with its
password. ``status`` exits 1 when any shown instrument has open problems, 0 otherwise, 3 when
the central store cannot be read; ``digest`` writes one HTML page per instrument.
"""

from __future__ import annotations

import json
import sys
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

from watcher.cli.exitcodes import ExitCode
from watcher.errors import StoreError
from watcher.records import printable

if TYPE_CHECKING:
    import argparse

    import psycopg

    from watcher.config import Config

RECENT_RUNS = 5


def _open(config: Config) -> psycopg.Connection[Any]:
    from watcher.central.reader import open_reader

    if config.central.url is None:
        raise StoreError(
            f"{config.source or 'the config'}: central.url is not set (--all and --instrument "
            "read the central store)"
        )
    return open_reader(config.central.url, config.central.connect_timeout_s)


def _names(conn: psycopg.Connection[Any], args: argparse.Namespace) -> list[str]:
    from watcher.central import reader

    known = reader.instrument_names(conn)
    if args.all:
        return known
    if args.instrument not in known:
        shown_known = ", ".join(known) if known else "none yet"
        raise StoreError(
            f"no instrument {args.instrument!r} in the central store (known: {shown_known})"
        )
    return [args.instrument]


def _iso(at: datetime | None, tz: ZoneInfo) -> str | None:
    return None if at is None else at.astimezone(tz).isoformat(timespec="seconds")


def collect_status(config: Config, args: argparse.Namespace) -> dict[str, Any]:
    """What ``status --all`` / ``--instrument`` shows, as plain data (the ``--json`` shape)."""
    from watcher.central import reader
    from watcher.central.url import masked

    tz = ZoneInfo(config.instrument.timezone)
    conn = _open(config)
    try:
        names = _names(conn, args)
        summaries = reader.instruments(conn, names)
        out: list[dict[str, Any]] = []
        for s in summaries:
            alerts = reader.open_alerts(conn, s.instrument)
            runs = reader.runs(conn, s.instrument, limit=RECENT_RUNS)
            out.append(
                {
                    "instrument": s.instrument,
                    "last_run": {
                        "file": s.last_file,
                        "status": None if s.last_status is None else str(s.last_status),
                        "acquired_at": _iso(s.last_acquired_at, tz),
                        "judged_at": _iso(s.last_judged_at, tz),
                    },
                    "runs": s.runs,
                    "open_problems": [
                        {
                            "check": a.check,
                            "subject": a.subject,
                            "severity": str(a.severity),
                            "since": _iso(a.raised_at, tz),
                            "message": a.message,
                            "run_file": a.run_file,
                            "channels": list(a.channels),
                        }
                        for a in alerts
                    ],
                    "worst_open": None if s.worst_open is None else str(s.worst_open),
                    "last_runs": [
                        {
                            "file": r.file_name,
                            "status": str(r.status),
                            "acquired_at": _iso(r.acquired_at, tz),
                            "findings": len(r.findings),
                        }
                        for r in runs
                    ],
                    "last_published_at": _iso(s.last_published_at, tz),
                }
            )
    finally:
        conn.close()
    assert config.central.url is not None  # noqa: S101 - _open checked it
    return {"central": masked(config.central.url), "instruments": out}


def render_status(state: dict[str, Any]) -> str:
    """The human view of ``collect_status``: one line per instrument, then its problems."""
    lines = [f"central store {state['central']}: {len(state['instruments'])} instrument(s)", ""]
    for i in state["instruments"]:
        last = i["last_run"]
        run = (
            f"{last['acquired_at']}  {last['status']:<10} {last['file']}"
            if last["file"]
            else "no runs yet"
        )
        n = len(i["open_problems"])
        problems = f"{n} open problem(s), worst {i['worst_open']}" if n else "no open problems"
        lines.append(f"{i['instrument']}: {run}  ({i['runs']} runs; {problems})")
        for p in i["open_problems"]:
            where = f", {p['run_file']}" if p["run_file"] else ""
            lines.append(
                f"  {p['severity']:<8} {p['check']}, {p['subject']} since {p['since']}{where}"
            )
    return "\n".join(printable(line) for line in lines)


def status_main(config: Config, args: argparse.Namespace) -> int:
    try:
        state = collect_status(config, args)
    except StoreError as exc:
        sys.stderr.write(f"ionwarden status: {exc}\n")
        return ExitCode.RUNTIME
    if args.json:
        sys.stdout.write(json.dumps(state, indent=2) + "\n")
    else:
        sys.stdout.write(render_status(state) + "\n")
    attention = any(i["open_problems"] for i in state["instruments"])
    return ExitCode.ATTENTION if attention else ExitCode.OK


def digest_main(config: Config, args: argparse.Namespace) -> int:
    """One digest per instrument from the central store: summary printed, HTML written to
    ``--out`` (a folder with ``--all``) or beside the state folder."""
    from watcher.central import reader
    from watcher.central.mirror import mirror
    from watcher.central.profile import config_of
    from watcher.cli.digest import parse_day
    from watcher.config import state_dir_of
    from watcher.notify.digest import build_digest, render_html, render_text

    try:
        conn = _open(config)
    except StoreError as exc:
        sys.stderr.write(f"ionwarden digest: {exc}\n")
        return ExitCode.RUNTIME
    try:
        try:
            names = _names(conn, args)
        except StoreError as exc:
            sys.stderr.write(f"ionwarden digest: {exc}\n")
            return ExitCode.RUNTIME
        folder = Path(args.out) if args.out and args.all else state_dir_of(config) / "digests"
        for name in names:
            # The instrument's own config draws its limit lines; others come from their profile.
            own = config if name == config.instrument.name else None
            cfg = own or config_of(name, reader.profile(conn, name))
            tz = ZoneInfo(cfg.instrument.timezone)
            try:
                day = parse_day(args.date, cfg.instrument.timezone, now_s=time.time())
            except ValueError:
                sys.stderr.write(f"ionwarden digest: --date {args.date!r}: expected YYYY-MM-DD\n")
                return ExitCode.USAGE
            start = datetime.combine(day, datetime.min.time(), tz).astimezone(UTC)
            end = start + timedelta(days=1, hours=1)  # a DST day is up to 25 h long
            with tempfile.TemporaryDirectory(prefix="ionwarden-digest-") as tmp:
                local = mirror(conn, name, start=start, end=end, state_dir=Path(tmp))
                try:
                    digest = build_digest(local, cfg, day)
                finally:
                    local.close()
            out = (
                Path(args.out)
                if args.out and not args.all
                else folder / f"digest-{_slug(name)}-{day.isoformat()}.html"
            )
            try:
                out.parent.mkdir(parents=True, exist_ok=True)
                out.write_text(render_html(digest), encoding="utf-8")
            except OSError as exc:
                sys.stderr.write(f"ionwarden digest: cannot write {out}: {exc.strerror}\n")
                return ExitCode.RUNTIME
            sys.stdout.write(render_text(digest) + f"\nHTML: {out}\n\n")
    finally:
        conn.close()
    return ExitCode.OK


def _slug(name: str) -> str:
    """An instrument name as a file-name part: letters, digits, ``-`` and ``_`` only."""
    kept = "".join(c if c.isalnum() or c in "-_" else "-" for c in name)
    return kept.strip("-") or "instrument"
