"""The pure alert state machine as truth tables (raise, escalate, remind, clear, filters)."""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, datetime

import pytest

from tests.helpers.records import make_finding, make_metrics
from watcher.config import Channel, Check
from watcher.notify.alert_state import may_clear, passes, remind_due, step
from watcher.records import AlertAction, AlertState, RunMetrics, Severity
from watcher.rules.judge import judge

W, C, N = Severity.WARNING, Severity.CRITICAL, Severity.NOTICE
H = 3600.0
T0 = datetime(2026, 4, 12, 1, 0, tzinfo=UTC)


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


def _evaluated(
    metrics: RunMetrics, file_name: str, checks: tuple[Check, ...]
) -> frozenset[tuple[str, str]]:
    return judge(
        metrics, file_name=file_name, acquired_at=T0, checks=checks, history=None
    ).evaluated


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
    caffeine = ("caffeine present", "expected_ion.caffeine.found")

    def evaluated(file_name: str) -> frozenset[tuple[str, str]]:
        return _evaluated(make_metrics(file=file_name), file_name, (qc, rx))

    sample = evaluated("S01_0412.mzML")
    assert not may_clear(caffeine, sample, configured, readable=True)
    assert may_clear(("unreadable", "file"), sample, configured, readable=True)
    assert may_clear(("removed check", "signal.tic_median"), sample, configured, readable=True)
    assert not may_clear(("heartbeat", "heartbeat"), sample, configured, readable=True)
    qc_run = evaluated("QC_0413.mzML")
    assert may_clear(caffeine, qc_run, configured, readable=True)
    assert not may_clear(caffeine, frozenset(), configured, readable=False)
    assert not may_clear(("unreadable", "file"), frozenset(), configured, readable=False)


def test_run_without_ms1_data_does_not_clear_calibration_alerts() -> None:
    """An MGF run (no MS1 spectra) measured no calibrant: its calibration check was not evaluated,
    so an open calibration alert stays open, while the signal check it did evaluate may clear."""
    drift = Check(name="calibration drift", metric="calibrant.siloxane-445.median_ppm")
    signal = Check(name="signal collapse", metric="signal.tic_median")
    configured = {"calibration drift", "signal collapse"}
    drift_key = ("calibration drift", "calibrant.siloxane-445.median_ppm")
    signal_key = ("signal collapse", "signal.tic_median")
    mzml = make_metrics(file="QC_0001.mzML")
    base = make_metrics(file="QC_0002.mgf")
    mgf = replace(base, signal=replace(base.signal, ms1_count=0))
    checks = (drift, signal)
    on_mzml = _evaluated(mzml, "QC_0001.mzML", checks)
    on_mgf = _evaluated(mgf, "QC_0002.mgf", checks)
    assert may_clear(drift_key, on_mzml, configured, readable=True)
    assert not may_clear(drift_key, on_mgf, configured, readable=True)
    assert may_clear(signal_key, on_mgf, configured, readable=True)


def test_a_check_clears_only_the_subjects_it_judged() -> None:
    """One check over every calibrant (``*``): a run where one calibrant has no value judged only
    the other, so the first one's open alert stays open while the same check clears the other."""
    drift = Check(name="calibration drift", metric="calibrant.*.median_ppm")
    configured = {"calibration drift"}
    lost = ("calibration drift", "calibrant.leu-enk.median_ppm")
    kept = ("calibration drift", "calibrant.siloxane-445.median_ppm")
    both = _evaluated(make_metrics(file="QC_0003.mzML"), "QC_0003.mzML", (drift,))
    assert both == {lost, kept}
    one = _evaluated(make_metrics(file="QC_0004.mzML", leu_enk_ppm=None), "QC_0004.mzML", (drift,))
    assert one == {kept}
    assert may_clear(kept, one, configured, readable=True)
    assert not may_clear(lost, one, configured, readable=True)
