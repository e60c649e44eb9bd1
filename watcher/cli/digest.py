"""``ionwarden digest [--date D] -c CONFIG [--out PATH]``: print a day's summary, write its HTML.

Reads the state database read-only; the day is in the instrument's time zone (default: today).
The HTML goes to ``--out`` or ``<state_dir>/digests/digest-YYYY-MM-DD.html``.
"""

from __future__ import annotations

import sys
import time
from datetime import date, datetime
from pathlib import Path
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

import structlog

from watcher.cli.exitcodes import ExitCode
from watcher.config import load, state_dir_of
from watcher.errors import StoreError

if TYPE_CHECKING:
    import argparse

log = structlog.get_logger("watcher.cli.digest")


def parse_day(text: str | None, timezone: str, *, now_s: float) -> date:
    """``YYYY-MM-DD``, ``today`` or ``yesterday``; None means today in ``timezone``."""
    today = datetime.fromtimestamp(now_s, ZoneInfo(timezone)).date()
    if text is None or text == "today":
        return today
    if text == "yesterday":
        return date.fromordinal(today.toordinal() - 1)
    return date.fromisoformat(text)


def main(args: argparse.Namespace) -> int:
    """Build the digest, print the summary and the HTML path (exit 0; 2 bad date; 3 no state)."""
    from watcher.notify.digest import build_digest, render_html, render_text
    from watcher.store import db

    config = load(args.config)
    if getattr(args, "all", False) or getattr(args, "instrument", None):
        from watcher.cli.central_view import digest_main

        return digest_main(config, args)
    try:
        day = parse_day(args.date, config.instrument.timezone, now_s=time.time())
    except ValueError:
        sys.stderr.write(f"ionwarden digest: --date {args.date!r}: expected YYYY-MM-DD\n")
        return ExitCode.USAGE
    state_dir = state_dir_of(config)
    try:
        conn = db.connect(state_dir, readonly=True)
    except StoreError as exc:
        sys.stderr.write(f"ionwarden digest: {exc}\n")
        return ExitCode.RUNTIME
    try:
        with db.read(conn):
            digest = build_digest(conn, config, day)
    finally:
        conn.close()
    out = Path(args.out) if args.out else state_dir / "digests" / f"digest-{day.isoformat()}.html"
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        out.write_text(render_html(digest), encoding="utf-8")
    except OSError as exc:
        sys.stderr.write(f"ionwarden digest: cannot write {out}: {exc.strerror} (use --out)\n")
        return ExitCode.RUNTIME
    log.info("digest.written", path=str(out), day=day.isoformat(), runs=digest.run_count)
    sys.stdout.write(render_text(digest) + f"\nHTML: {out}\n")
    return ExitCode.OK
