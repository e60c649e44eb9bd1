"""Readiness decisions for files that may still be written: pure functions, no I/O.

A file is handed on only when two stats ``settle_s`` apart agree on size and ``mtime_ns`` and its
format says it is whole; size alone proves nothing (a preallocated file with a NUL tail has its
final size from the start, docs/reliability.md item 2). A file that keeps changing is being
written and never alarms; one that stays unchanged but incomplete for ``max_wait_s`` gives up.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from enum import StrEnum
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from pathlib import Path


@dataclass(frozen=True, slots=True)
class FileStat:
    """The two stat fields that tell whether a file is still being written."""

    size: int
    mtime_ns: int


class Decision(StrEnum):
    """What to do with a pending file after one look at it."""

    READY = "ready"  # settled and whole: hand it to the job table
    WAIT = "wait"  # look again at ``next_check_s``
    GIVE_UP = "give_up"  # unchanged but incomplete for max_wait_s: judge it unreadable
    GONE = "gone"  # deleted or renamed away before it settled: forget it


@dataclass(frozen=True, slots=True)
class Pending:
    """One file waiting to settle.

    Attributes:
        path: the file.
        first_seen_s: when intake first heard of it (monotonic-free wall clock, seconds).
        last_stat: the previous look, None before the first.
        last_change_s: when size or mtime last differed from the look before.
        next_check_s: when to look again.
        checks: how many looks found it not ready (drives the back-off).
        reason: the latest completeness reason, for the give-up message.
    """

    path: Path
    first_seen_s: float
    last_stat: FileStat | None
    last_change_s: float
    next_check_s: float
    checks: int = 0
    reason: str | None = None


def new_pending(path: Path, now_s: float, settle_s: float) -> Pending:
    """A file just heard of: first look at once, so its first stat starts the settle clock."""
    return Pending(
        path=path, first_seen_s=now_s, last_stat=None, last_change_s=now_s, next_check_s=now_s
    )


def recheck_delay_s(checks: int, settle_s: float, *, max_delay_s: float = 60.0) -> float:
    """Delay before the next look: settle_s, then doubling per unready look, capped.

    A file that stays incomplete for hours is looked at about once a minute, not every settle_s.
    """
    if checks <= 0:
        return settle_s
    return min(max(settle_s, max_delay_s), settle_s * 2.0 ** min(checks, 16))


def step(
    pending: Pending,
    stat: FileStat | None,
    now_s: float,
    *,
    settle_s: float,
    max_wait_s: float,
    incomplete_reason: str | None,
) -> tuple[Decision, Pending]:
    """One look at a pending file.

    Args:
        pending: its state before this look.
        stat: the stat taken now, None when the file no longer exists.
        now_s: the time of the look (seconds).
        settle_s: how long size and mtime must stay unchanged.
        max_wait_s: how long an unchanged file may stay incomplete before it is given up.
        incomplete_reason: what the format check said (None = whole). Only consulted when the
            stats agree, so callers may pass None and call again with the real reason.

    Returns:
        The decision and the pending state to keep (unchanged for READY, GONE).
    """
    if stat is None:
        return Decision.GONE, pending
    changed = pending.last_stat is None or stat != pending.last_stat
    if changed:
        # A change restarts the settle clock and resets the back-off: the file is being written.
        first_look = pending.last_stat is None
        nxt = replace(
            pending,
            last_stat=stat,
            last_change_s=pending.last_change_s if first_look else now_s,
            next_check_s=now_s + settle_s,
            checks=0,
        )
        return Decision.WAIT, nxt
    if now_s - pending.last_change_s < settle_s:
        return Decision.WAIT, replace(pending, next_check_s=pending.last_change_s + settle_s)
    if incomplete_reason is None:
        return Decision.READY, pending
    if now_s - pending.last_change_s >= max_wait_s:
        return Decision.GIVE_UP, replace(pending, reason=incomplete_reason)
    checks = pending.checks + 1
    delay_s = min(
        recheck_delay_s(checks, settle_s), max(0.0, pending.last_change_s + max_wait_s - now_s)
    )
    return Decision.WAIT, replace(
        pending, checks=checks, next_check_s=now_s + max(delay_s, 0.05), reason=incomplete_reason
    )


def incomplete_message(reason: str, waited_s: float) -> str:
    """Verdict text for a file that never completed: ``incomplete: <why>, still so after 24 h``."""
    if waited_s < 120:
        shown = f"{waited_s:.0f} s"
    elif waited_s < 7200:
        shown = f"{waited_s / 60:.0f} min"
    else:
        hours = waited_s / 3600.0
        shown = f"{hours:.0f} h" if hours >= 10 else f"{hours:.1f} h"
    return f"incomplete: {reason}, still so after {shown}"
