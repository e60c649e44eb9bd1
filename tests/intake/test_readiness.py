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


STALL_S = 600.0


def _look(pending, stat, now_s, reason=None):
    return step(
        pending,
        stat,
        now_s,
        settle_s=SETTLE_S,
        max_wait_s=WAIT_S,
        incomplete_reason=reason,
        stall_s=STALL_S,
    )


def _ns(seconds: float) -> int:
    return round(seconds * 1e9)


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


@pytest.mark.parametrize("later", [FileStat(11, _ns(SETTLE_S)), FileStat(10, _ns(SETTLE_S))])
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


def test_growing_file_waits_until_max_wait_s():
    """A file that keeps changing is being written: no alarm until max_wait_s, then reported."""
    p = new_pending(P, 0.0, SETTLE_S)
    now = 0.0
    for i in range(20):
        decision, p = _look(p, FileStat(10 + i, _ns(now)), now, reason="no closing tag")
        assert decision is Decision.WAIT
        now += WAIT_S / 20
    decision, p = _look(p, FileStat(99, _ns(now)), now, reason="no closing tag")
    assert decision is Decision.GIVE_UP
    assert p.reason == "no closing tag"


def test_settled_but_incomplete_waits_then_gives_up():
    """Unchanged but not whole (e.g. a NUL-filled tail): wait, and give up after stall_s."""
    _, p = _look(new_pending(P, 0.0, SETTLE_S), FileStat(10, 1), 0.0)
    decision, p = _look(p, FileStat(10, 1), SETTLE_S, reason="NUL-filled tail")
    assert decision is Decision.WAIT
    assert p.next_check_s > SETTLE_S
    decision, _ = _look(p, FileStat(10, 1), STALL_S - 1.0, reason="NUL-filled tail")
    assert decision is Decision.WAIT
    decision, p = _look(p, FileStat(10, 1), STALL_S, reason="NUL-filled tail")
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


def test_settle_runs_from_the_last_write_not_from_the_look():
    """A write at 10.0 s first seen at 10.4 s (previous look 9.9 s): ready at 10.5 s, settle_s
    after the write, not settle_s after the look that noticed it."""
    _, p = _look(new_pending(P, 0.0, SETTLE_S), FileStat(10, _ns(9.0)), 9.9)
    decision, p = _look(p, FileStat(20, _ns(10.0)), 10.4)
    assert decision is Decision.WAIT
    assert p.last_change_s == pytest.approx(10.0)
    assert p.next_check_s == pytest.approx(10.5)
    decision, _ = _look(p, FileStat(20, _ns(10.0)), 10.5)
    assert decision is Decision.READY


def test_a_skewed_mtime_stays_between_the_looks():
    """A file server whose clock runs an hour behind or ahead cannot move the change outside the
    span between the look that saw the old stat and the one that saw the new."""
    _, p = _look(new_pending(P, 0.0, SETTLE_S), FileStat(10, _ns(100.0)), 100.0)
    _, behind = _look(p, FileStat(20, _ns(100.2 - 3600)), 100.2)
    assert behind.last_change_s == pytest.approx(100.0)
    _, ahead = _look(p, FileStat(20, _ns(100.2 + 3600)), 100.2)
    assert ahead.last_change_s == pytest.approx(100.2)


def test_unchanged_time_survives_a_restart():
    """After a restart the first look takes the file's mtime: an incomplete file last written an
    hour ago is reported at the next look, not stall_s after the restart."""
    now = 10_000.0
    _, p = _look(new_pending(P, now, SETTLE_S), FileStat(10, _ns(now - 3600)), now)
    assert p.last_change_s == pytest.approx(now - 3600)
    decision, _ = _look(p, FileStat(10, _ns(now - 3600)), now + 0.1, reason="NUL-filled tail")
    assert decision is Decision.GIVE_UP
