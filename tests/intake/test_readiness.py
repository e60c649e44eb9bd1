"""Readiness decisions: two agreeing stats settle_s apart plus a whole format, or keep waiting."""

from __future__ import annotations

from pathlib import Path

import pytest

from watcher.intake.readiness import (
    Decision,
    FileStat,
    incomplete_message,
    new_pending,
    recheck_delay_s,
    step,
)

P = Path("/exports/QC_0001.mzML")
SETTLE_S = 0.5
WAIT_S = 3600.0


def _look(pending, stat, now_s, reason=None):
    return step(
        pending, stat, now_s, settle_s=SETTLE_S, max_wait_s=WAIT_S, incomplete_reason=reason
    )


def test_first_look_never_ready():
    """One stat alone proves nothing: the first look always waits settle_s."""
    decision, nxt = _look(new_pending(P, 0.0, SETTLE_S), FileStat(10, 1), 0.0)
    assert decision is Decision.WAIT
    assert nxt.next_check_s == pytest.approx(SETTLE_S)


def test_two_agreeing_looks_settle_apart_are_ready():
    """Same size and mtime_ns across two looks settle_s apart, format whole: ready."""
    _, p = _look(new_pending(P, 0.0, SETTLE_S), FileStat(10, 1), 0.0)
    decision, _ = _look(p, FileStat(10, 1), SETTLE_S)
    assert decision is Decision.READY


def test_looks_closer_than_settle_wait():
    """Agreeing looks less than settle_s after the last change still wait."""
    _, p = _look(new_pending(P, 0.0, SETTLE_S), FileStat(10, 1), 0.0)
    decision, _ = _look(p, FileStat(10, 1), SETTLE_S / 2)
    assert decision is Decision.WAIT


@pytest.mark.parametrize("later", [FileStat(11, 1), FileStat(10, 2)])
def test_change_restarts_clock(later):
    """A new size or a new mtime_ns (same size, rewritten) restarts the settle clock."""
    _, p = _look(new_pending(P, 0.0, SETTLE_S), FileStat(10, 1), 0.0)
    decision, p = _look(p, later, SETTLE_S)
    assert decision is Decision.WAIT
    assert p.last_change_s == SETTLE_S
    decision, _ = _look(p, later, SETTLE_S * 1.5)
    assert decision is Decision.WAIT
    decision, _ = _look(p, later, SETTLE_S * 2)
    assert decision is Decision.READY


def test_growing_file_never_gives_up():
    """A file that keeps changing for far longer than max_wait_s never alarms."""
    p = new_pending(P, 0.0, SETTLE_S)
    now = 0.0
    for i in range(200):
        decision, p = _look(p, FileStat(10 + i, 1 + i), now, reason="no closing tag")
        assert decision is Decision.WAIT
        now += WAIT_S / 20  # 10 x max_wait_s in total
    assert now > 5 * WAIT_S


def test_settled_but_incomplete_waits_then_gives_up():
    """Unchanged but not whole (e.g. a NUL-filled tail): wait, and give up after max_wait_s."""
    _, p = _look(new_pending(P, 0.0, SETTLE_S), FileStat(10, 1), 0.0)
    decision, p = _look(p, FileStat(10, 1), SETTLE_S, reason="NUL-filled tail")
    assert decision is Decision.WAIT
    assert p.next_check_s > SETTLE_S
    decision, p = _look(p, FileStat(10, 1), WAIT_S, reason="NUL-filled tail")
    assert decision is Decision.GIVE_UP
    assert p.reason == "NUL-filled tail"


def test_vanished_file_is_gone():
    """A file deleted or renamed away before it settled is forgotten."""
    decision, _ = _look(new_pending(P, 0.0, SETTLE_S), None, 0.0)
    assert decision is Decision.GONE


@pytest.mark.parametrize(
    ("checks", "expected"), [(0, 0.5), (1, 1.0), (2, 2.0), (3, 4.0), (10, 60.0), (100, 60.0)]
)
def test_backoff_doubles_and_caps(checks, expected):
    """Unready looks back off: settle_s doubling per look, capped at a minute."""
    assert recheck_delay_s(checks, SETTLE_S) == pytest.approx(expected)


def test_incomplete_message_names_reason_and_hours():
    """The give-up text reads 'incomplete: <reason>, still so after <duration>'."""
    assert incomplete_message("no closing </mzML>", 24 * 3600) == (
        "incomplete: no closing </mzML>, still so after 24 h"
    )
    assert incomplete_message("x", 1800) == "incomplete: x, still so after 30 min"
    assert incomplete_message("x", 5) == "incomplete: x, still so after 5 s"
    assert incomplete_message("x", 3 * 3600) == "incomplete: x, still so after 3.0 h"
