"""Readiness decisions for files that may still be written: pure functions, no I/O.

A file is handed on only when its size and ``mtime_ns`` have stayed unchanged for ``settle_s``
and its format says it is whole; size alone proves nothing (a preallocated file with a NUL tail
has its final size from the start, docs/reliability.md item 2). The settle clock runs from the
last change as the file itself records it (its mtime, kept between the look that saw the change
and the look before, so a skewed file-server clock cannot stretch or shorten it): a file is
handed on ``settle_s`` after its last write, not a whole period after the look that noticed it,
and how long a file has been unchanged survives a daemon restart.

Two ways to end incomplete: unchanged but incomplete for ``stall_s`` (the copy died: report it
within minutes, not the next day), or still changing after ``max_wait_s`` (a writer that never
finishes).
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
    GIVE_UP = "give_up"  # stalled incomplete, or still changing after max_wait_s: unreadable
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
        last_look_s: when the previous look was taken (bounds the mtime of a change it saw).
    """

    path: Path
    first_seen_s: float
    last_stat: FileStat | None
    last_change_s: float
    next_check_s: float
    checks: int = 0
    reason: str | None = None
    last_look_s: float | None = None


def changed_at_s(stat: FileStat, now_s: float, previous_look_s: float | None) -> float:
    """When the file last changed: its mtime, within (previous look, now].

    The change happened after the previous look that saw the old stat and before this one, so
    a file server's clock that runs ahead or behind moves it at most within that span. At the
    first look (no previous one) the mtime counts up to now: after a restart, a file unchanged
    for an hour is known to be so.
    """
    mtime_s = stat.mtime_ns / 1e9
    lower = previous_look_s if previous_look_s is not None else float("-inf")
    return min(max(mtime_s, lower), now_s)


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


MIN_LOOK_GAP_S = 0.05  # two looks at least this far apart: a burst of hints is one look


def step(
    pending: Pending,
    stat: FileStat | None,
    now_s: float,
    *,
    settle_s: float,
    max_wait_s: float,
    incomplete_reason: str | None,
    stall_s: float | None = None,
) -> tuple[Decision, Pending]:
    """One look at a pending file.

    Args:
        pending: its state before this look.
        stat: the stat taken now, None when the file no longer exists.
        now_s: the time of the look (seconds).
        settle_s: how long size and mtime must stay unchanged.
        max_wait_s: how long a file may keep changing before it is given up.
        incomplete_reason: what the format check said (None = whole). Only consulted when the
            stats agree, so callers may pass None and call again with the real reason.
        stall_s: how long an unchanged file may stay incomplete before it is given up
            (None: ``max_wait_s``).

    Returns:
        The decision and the pending state to keep (unchanged for READY, GONE).
    """
    if stat is None:
        return Decision.GONE, pending
    stall_s = max_wait_s if stall_s is None else stall_s
    changed = pending.last_stat is None or stat != pending.last_stat
    if changed:
        # A change restarts the settle clock and resets the back-off: the file is being written.
        if pending.last_stat is not None and now_s - pending.first_seen_s >= max_wait_s:
            return Decision.GIVE_UP, replace(
                pending, last_stat=stat, reason=incomplete_reason or "still being written"
            )
        last_change_s = changed_at_s(stat, now_s, pending.last_look_s)
        nxt = replace(
            pending,
            last_stat=stat,
            last_change_s=last_change_s,
            next_check_s=max(last_change_s + settle_s, now_s + MIN_LOOK_GAP_S),
            checks=0,
            last_look_s=now_s,
        )
        return Decision.WAIT, nxt
    looked = replace(pending, last_look_s=now_s)
    if now_s - pending.last_change_s < settle_s:
        return Decision.WAIT, replace(looked, next_check_s=pending.last_change_s + settle_s)
    if incomplete_reason is None:
        return Decision.READY, looked
    if now_s - pending.last_change_s >= stall_s:
        return Decision.GIVE_UP, replace(looked, reason=incomplete_reason)
    checks = pending.checks + 1
    delay_s = min(
        recheck_delay_s(checks, settle_s), max(0.0, pending.last_change_s + stall_s - now_s)
    )
    return Decision.WAIT, replace(
        looked,
        checks=checks,
        next_check_s=now_s + max(delay_s, MIN_LOOK_GAP_S),
        reason=incomplete_reason,
    )


def incomplete_message(reason: str, waited_s: float) -> str:
    """Verdict text for a file that never completed: ``incomplete: <why>, still so after 24 h``.

    ``waited_s``: how long it has been unchanged (stalled), or waited while changing."""
    if waited_s < 120:
        shown = f"{waited_s:.0f} s"
    elif waited_s < 7200:
        shown = f"{waited_s / 60:.0f} min"
    else:
        hours = waited_s / 3600.0
        shown = f"{hours:.0f} h" if hours >= 10 else f"{hours:.1f} h"
    return f"incomplete: {reason}, still so after {shown}"
