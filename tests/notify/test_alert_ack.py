"""The state machine with acknowledgements, as a truth table (pure: no database, no clock).

An acknowledged alert gets no reminders while it stays at that severity, still escalates (and
the acknowledgement lapses), and still clears with a message (common practice for on-call
alerting: an acknowledgement silences the repeat, not the change).
"""

from __future__ import annotations

from tests.helpers.records import make_finding
from watcher.notify import alert_state as machine
from watcher.records import AlertAction, Severity

HOUR_S = 3600.0


def test_acknowledged_alert_is_not_reminded_but_escalates_and_clears() -> None:
    warning = make_finding(Severity.WARNING, value=3.4)
    critical = make_finding(Severity.CRITICAL, value=6.1)
    state, action = machine.step(None, warning, 0.0, remind_every_s=HOUR_S)
    assert action is AlertAction.RAISE
    assert state is not None
    acked = machine.acknowledge(state, 60.0)
    assert acked.acked_at_s == 60.0
    # Same severity, long past the reminder period: nothing, from a run or from the timer.
    same, action = machine.step(acked, warning, 5 * HOUR_S, remind_every_s=HOUR_S)
    assert action is None
    assert same is not None
    assert same.acked_at_s == 60.0
    assert machine.remind_due(same, 9 * HOUR_S, remind_every_s=HOUR_S) == (same, None)
    # Worse: sent, and the acknowledgement lapses, so reminders resume at critical.
    worse, action = machine.step(same, critical, 10 * HOUR_S, remind_every_s=HOUR_S)
    assert action is AlertAction.ESCALATE
    assert worse is not None
    assert worse.acked_at_s is None
    assert worse.severity is Severity.CRITICAL
    _, action = machine.remind_due(worse, 11 * HOUR_S, remind_every_s=HOUR_S)
    assert action is AlertAction.REMIND
    # Fine again: cleared, with its message, acknowledged or not.
    gone, action = machine.step(
        machine.acknowledge(worse, 10.5 * HOUR_S), None, 12 * HOUR_S, remind_every_s=HOUR_S
    )
    assert (gone, action) == (None, AlertAction.CLEAR)


def test_without_acknowledgement_the_reminder_comes() -> None:
    """The control case: the same alert, not acknowledged, is reminded of after the period."""
    warning = make_finding(Severity.WARNING, value=3.4)
    state, _ = machine.step(None, warning, 0.0, remind_every_s=HOUR_S)
    assert state is not None
    _, action = machine.step(state, warning, 5 * HOUR_S, remind_every_s=HOUR_S)
    assert action is AlertAction.REMIND


def test_a_lower_severity_keeps_the_acknowledgement() -> None:
    """Critical acknowledged, then a warning run: still open at critical, still quiet."""
    critical = make_finding(Severity.CRITICAL, value=6.1)
    warning = make_finding(Severity.WARNING, value=3.4)
    state, _ = machine.step(None, critical, 0.0, remind_every_s=HOUR_S)
    assert state is not None
    kept, action = machine.step(
        machine.acknowledge(state, 1.0), warning, 5 * HOUR_S, remind_every_s=HOUR_S
    )
    assert action is None
    assert kept is not None
    assert kept.acked_at_s == 1.0
