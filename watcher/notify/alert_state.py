"""The alert state machine: one pure step per alert key from (previous state, finding, time).

An alert key is (instrument, check, subject) per channel. The caller decides which keys a run may
touch (only runs a check was evaluated on can clear that check's alerts) and which findings reach a
channel (``passes``); this module only decides raise / escalate / remind / clear, so it can be
tested as a truth table without a database or a clock.
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING

from watcher.records import AlertAction, AlertState, Finding

if TYPE_CHECKING:
    from watcher.config import Channel

# Pseudo-checks that are not in the config: an unreadable run file, and runs that stopped coming.
UNREADABLE_CHECK = "unreadable"
HEARTBEAT_CHECK = "heartbeat"


def step(
    previous: AlertState | None,
    finding: Finding | None,
    now_s: float,
    *,
    remind_every_s: float | None,
) -> tuple[AlertState | None, AlertAction | None]:
    """Advance one alert key by one evaluated run.

    Args:
        previous: the open alert, or None when none is open.
        finding: this run's finding for the key that reaches the channel, or None when the run was
            fine for it. Only call this for runs the check was evaluated on.
        now_s: epoch seconds of the run's judgement.
        remind_every_s: remind when the alert stays open this long after the last send;
            None: never.

    Returns:
        The new state (None = closed) and the action to tell people about (None = nothing new).
    """
    if previous is None:
        if finding is None:
            return None, None
        state = AlertState(
            severity=finding.severity, raised_at_s=now_s, last_sent_at_s=now_s, finding=finding
        )
        return state, AlertAction.RAISE
    if finding is None:
        return None, AlertAction.CLEAR
    if finding.severity.rank > previous.severity.rank:
        # An acknowledgement holds at the severity it was given for: a worse state is news.
        return (
            replace(
                previous,
                severity=finding.severity,
                last_sent_at_s=now_s,
                finding=finding,
                acked_at_s=None,
            ),
            AlertAction.ESCALATE,
        )
    # Same or lower severity: still open. A drop does not lower ``severity``, so flapping between
    # warning and critical is told once, not on every swing.
    kept = replace(previous, finding=finding)
    return remind_due(kept, now_s, remind_every_s=remind_every_s)


def remind_due(
    state: AlertState, now_s: float, *, remind_every_s: float | None
) -> tuple[AlertState, AlertAction | None]:
    """A reminder when ``remind_every_s`` has passed since the last send (runs and ``tick()``).

    An acknowledged alert is never reminded of: a person said they have seen it.
    """
    if state.acked_at_s is not None:
        return state, None
    if remind_every_s is None or now_s - state.last_sent_at_s < remind_every_s:
        return state, None
    return replace(state, last_sent_at_s=now_s), AlertAction.REMIND


def acknowledge(state: AlertState, now_s: float) -> AlertState:
    """The alert acknowledged now, at its current severity (again: the time of the latest)."""
    return replace(state, acked_at_s=now_s)


def summary_sent(state: AlertState, now_s: float) -> AlertState:
    """The alert as told once more in the summary at a silence's end: reminders count from now."""
    return replace(state, last_sent_at_s=now_s)


def passes(channel: Channel, finding: Finding) -> bool:
    """Whether a finding is for this channel: at least its min_severity, and one of its checks."""
    if finding.severity.rank < channel.min_severity.rank:
        return False
    return not channel.checks or finding.check in channel.checks


def may_clear(
    key: tuple[str, str],
    evaluated: frozenset[tuple[str, str]],
    configured: set[str],
    *,
    readable: bool,
) -> bool:
    """Whether this run may clear the open alert ``key`` = (check, subject).

    ``evaluated`` is the run's ``Verdict.evaluated``: the (check, metric path) pairs the rules
    judged. A pair whose metric is null on this run (no calibrant measured in an MGF file) was not
    judged and keeps its alert open; so does the same check's alert on another subject. An
    unreadable run judges nothing. A readable run clears the ``unreadable`` alert. An alert of a
    check no longer in the config is cleared by the next readable run, so a removed check cannot
    keep an alert open forever. A run never clears the no-run alert (the no-run watch does).
    """
    check_name = key[0]
    if check_name == HEARTBEAT_CHECK or not readable:
        return False
    if check_name == UNREADABLE_CHECK or check_name not in configured:
        return True
    return key in evaluated
