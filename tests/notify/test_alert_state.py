"""The pure alert state machine as truth tables (raise, escalate, remind, clear, filters)."""

from __future__ import annotations

from dataclasses import replace

import pytest

from tests.helpers.records import make_finding, make_metrics
from watcher.config import Channel, Check
from watcher.notify.alert_state import (
    clearable_checks,
    is_clearable,
    passes,
    remind_due,
    step,
)
from watcher.records import AlertAction, AlertState, Severity
from watcher.rules.judge import evaluated_checks

W, C, N = Severity.WARNING, Severity.CRITICAL, Severity.NOTICE
H = 3600.0


def _state(sev: Severity, *, sent_s: float = 0.0) -> AlertState:
    return AlertState(
        severity=sev, raised_at_s=0.0, last_sent_at_s=sent_s, finding=make_finding(sev)
    )


@pytest.mark.parametrize(
    ("previous", "finding", "now_s", "action", "open_after"),
    [
        (None, None, 10.0, None, False),
        (None, W, 10.0, AlertAction.RAISE, True),
        (W, W, 10.0, None, True),  # same state: never sent twice
        (W, C, 10.0, AlertAction.ESCALATE, True),
        (C, W, 10.0, None, True),  # better but still open: quiet
        (W, W, 4 * H, AlertAction.REMIND, True),
        (W, None, 10.0, AlertAction.CLEAR, False),
        (C, None, 4 * H, AlertAction.CLEAR, False),
    ],
)
def test_step_truth_table(
    previous: Severity | None,
    finding: Severity | None,
    now_s: float,
    action: AlertAction | None,
    open_after: bool,
) -> None:
    """Each (previous, finding) pair gives the one expected action and open/closed state."""
    prev = _state(previous) if previous else None
    f = make_finding(finding) if finding else None
    state, got = step(prev, f, now_s, remind_every_s=4 * H)
    assert got is action
    assert (state is not None) is open_after


def test_escalation_keeps_highest_severity_so_flapping_is_quiet() -> None:
    """critical -> warning -> critical sends the escalation once, not on every swing."""
    state, _ = step(None, make_finding(W), 0.0, remind_every_s=None)
    state, a1 = step(state, make_finding(C), 1.0, remind_every_s=None)
    state, a2 = step(state, make_finding(W), 2.0, remind_every_s=None)
    state, a3 = step(state, make_finding(C), 3.0, remind_every_s=None)
    assert (a1, a2, a3) == (AlertAction.ESCALATE, None, None)


def test_reminder_restarts_the_interval() -> None:
    """After a reminder the next one is due remind_every_s later, not at once."""
    state, action = remind_due(_state(W), 4 * H, remind_every_s=4 * H)
    assert action is AlertAction.REMIND
    assert remind_due(state, 4 * H + 60, remind_every_s=4 * H)[1] is None
    assert remind_due(state, 8 * H, remind_every_s=4 * H)[1] is AlertAction.REMIND
    assert remind_due(state, 100 * H, remind_every_s=None)[1] is None


@pytest.mark.parametrize(
    ("min_sev", "checks", "sev", "check", "ok"),
    [
        (W, (), N, "calibration drift", False),
        (W, (), W, "calibration drift", True),
        (C, (), W, "calibration drift", False),
        (N, ("caffeine present",), C, "calibration drift", False),
        (N, ("caffeine present",), N, "caffeine present", True),
    ],
)
def test_channel_filter(
    min_sev: Severity, checks: tuple[str, ...], sev: Severity, check: str, ok: bool
) -> None:
    """A finding reaches a channel at or above its min_severity and in its checks list."""
    channel = Channel(name="c", url="json://h", min_severity=min_sev, checks=checks)
    assert passes(channel, make_finding(sev, check=check)) is ok


def test_only_evaluated_checks_may_clear() -> None:
    """A QC-only check is clearable by QC runs, never by sample runs or unreadable runs."""
    qc = Check(name="caffeine present", metric="expected_ion.caffeine.found", applies_to=("QC_*",))
    # re: matches the whole file name, as the judge reads it (watcher.config.matches_applies_to).
    rx = Check(name="blank", metric="signal.tic_median", applies_to=("re:BLANK_\\d+\\.mzML",))
    assert qc.applies_to_file("QC_0412.mzML")
    assert not qc.applies_to_file("S01_0412.mzML")
    assert rx.applies_to_file("BLANK_07.mzML")
    assert not rx.applies_to_file("QC_07.mzML")
    configured = {"caffeine present", "blank"}

    def evaluated(file_name: str) -> set[str]:
        metrics = make_metrics(file=file_name)
        return evaluated_checks(metrics, file_name=file_name, checks=(qc, rx))

    sample = clearable_checks(evaluated("S01_0412.mzML"), readable=True)
    assert not is_clearable("caffeine present", sample, configured, readable=True)
    assert is_clearable("unreadable", sample, configured, readable=True)
    assert is_clearable("removed check", sample, configured, readable=True)
    assert not is_clearable("heartbeat", sample, configured, readable=True)
    qc_run = clearable_checks(evaluated("QC_0413.mzML"), readable=True)
    assert is_clearable("caffeine present", qc_run, configured, readable=True)
    assert not is_clearable("caffeine present", set(), configured, readable=False)


def test_run_without_ms1_data_does_not_clear_calibration_alerts() -> None:
    """An MGF run (no MS1 spectra) measured no calibrant: its calibration check was not evaluated,
    so an open calibration alert stays open, while the signal check it did evaluate may clear."""
    drift = Check(name="calibration drift", metric="calibrant.siloxane-445.median_ppm")
    signal = Check(name="signal collapse", metric="signal.tic_median")
    configured = {"calibration drift", "signal collapse"}
    mzml = make_metrics(file="QC_0001.mzML")
    base = make_metrics(file="QC_0002.mgf")
    mgf = replace(base, signal=replace(base.signal, ms1_count=0))
    checks = (drift, signal)
    on_mzml = clearable_checks(
        evaluated_checks(mzml, file_name="QC_0001.mzML", checks=checks), readable=True
    )
    on_mgf = clearable_checks(
        evaluated_checks(mgf, file_name="QC_0002.mgf", checks=checks), readable=True
    )
    assert is_clearable("calibration drift", on_mzml, configured, readable=True)
    assert not is_clearable("calibration drift", on_mgf, configured, readable=True)
    assert is_clearable("signal collapse", on_mgf, configured, readable=True)
