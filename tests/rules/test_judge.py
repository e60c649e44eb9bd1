"""The judge: applicable checks on a run's metrics and history into findings and a run status.

Demo names from the project brief (invented lab "Larkfield Metabolomics Core"); calibrant and ion
m/z values from tests/data/check-ions.tsv (molmass and pyteomics agree there).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING

import pytest
from hypothesis import given
from hypothesis import strategies as st

from tests.helpers.records import make_metrics
from watcher.config import BaselineSpec, Check, Condition, CusumSpec, EwmaSpec, ForecastSpec
from watcher.records import (
    STATUS_RANK,
    Finding,
    HistoryPoint,
    RunMetrics,
    Severity,
    Status,
    TrendState,
)
from watcher.rules.judge import History, judge

if TYPE_CHECKING:
    from collections.abc import Sequence

T0 = datetime(2026, 4, 12, 1, 0, tzinfo=UTC)


def judge_at_t0(
    metrics: RunMetrics, file_name: str, checks: Sequence[Check], history: History | None
) -> tuple[Status, tuple[Finding, ...]]:
    """``judge`` for a run acquired at T0, the time every test here measures from."""
    judged = judge(metrics, file_name=file_name, acquired_at=T0, checks=checks, history=history)
    return judged.status, judged.findings


class ListHistory:
    """An in-memory History over a list of points (the protocol's smallest real implementation)."""

    def __init__(self, points: dict[str, list[HistoryPoint]]) -> None:
        self.points = points

    def series(self, metric: str, *, before: datetime, limit: int) -> Sequence[HistoryPoint]:
        earlier = [p for p in self.points.get(metric, []) if p.acquired_at < before]
        return earlier[max(0, len(earlier) - limit) :] if limit > 0 else []

    def trend_state(self, check: str, path: str, *, before: datetime) -> TrendState | None:
        return None  # no stored statistics: EWMA and CUSUM start over the recent window


def history_of(
    metric: str,
    values: Sequence[float | bool | None],
    *,
    status: Status = Status.OK,
    prefix: str = "QC_",
    step: timedelta = timedelta(hours=1),
) -> ListHistory:
    """One point per value, an hour apart, ending one step before T0."""
    n = len(values)
    points = [
        HistoryPoint(
            file_name=f"{prefix}{i:04d}.mzML",
            acquired_at=T0 - (n - i) * step,
            value=v,
            status=status,
        )
        for i, v in enumerate(values)
    ]
    return ListHistory({metric: points})


DRIFT = Check(
    name="calibration drift",
    metric="calibrant.*.median_ppm",
    warning=Condition(outside=(-3.0, 3.0)),
    critical=Condition(outside=(-5.0, 5.0)),
)


def test_no_findings_is_ok() -> None:
    """A run inside every limit has status ok and no findings."""
    status, findings = judge_at_t0(make_metrics(), "QC_0001.mzML", [DRIFT], None)
    assert status is Status.OK
    assert findings == ()


def test_star_gives_one_finding_per_calibrant_with_the_concrete_path() -> None:
    """calibrant.*.median_ppm is judged per calibrant; metric and subject are the concrete path."""
    metrics = make_metrics(siloxane_ppm=5.8, leu_enk_ppm=-3.4)
    status, findings = judge_at_t0(metrics, "QC_0412.mzML", [DRIFT], None)
    assert status is Status.CRITICAL  # the highest severity wins
    assert [(f.subject, f.severity) for f in findings] == [
        ("calibrant.siloxane-445.median_ppm", Severity.CRITICAL),
        ("calibrant.leu-enk.median_ppm", Severity.WARNING),
    ]
    assert all(f.metric == f.subject for f in findings)
    first = findings[0]
    assert first.message == (
        "QC_0412.mzML: calibrant siloxane-445 median error +5.8 ppm, outside ±5 ppm (critical) "
        "— recalibrate before the next sample"
    )
    assert (first.value, first.limit, first.rule, first.check) == (
        5.8,
        "outside [-5, 5]",
        "limit",
        "calibration drift",
    )


def test_one_finding_per_check_and_subject_critical_first() -> None:
    """When warning and critical both hold, only the critical finding is made."""
    _, findings = judge_at_t0(make_metrics(siloxane_ppm=-7.0), "QC_1.mzML", [DRIFT], None)
    assert [f.severity for f in findings] == [Severity.CRITICAL]


def test_status_is_the_highest_severity_across_checks() -> None:
    """A notice and a warning from two checks give status warning."""
    checks = [
        Check(name="tic", metric="signal.tic_median", notice=Condition(below=2.0e6)),
        Check(
            name="drift", metric="calibrant.siloxane-445.median_ppm", warning=Condition(above=0.4)
        ),
    ]
    status, findings = judge_at_t0(make_metrics(), "QC_1.mzML", checks, None)
    assert [f.severity for f in findings] == [Severity.NOTICE, Severity.WARNING]
    assert status is Status.WARNING


def test_missing_metric_gives_no_finding() -> None:
    """A calibrant that was never found (None) does not fire its limit."""
    _, findings = judge_at_t0(
        make_metrics(siloxane_ppm=None, leu_enk_ppm=9.0), "QC_1.mzML", [DRIFT], None
    )
    assert [f.subject for f in findings] == ["calibrant.leu-enk.median_ppm"]


def test_expected_ion_missing_on_qc_runs_only() -> None:
    """is: false fires on a QC run that lacks caffeine, and the check skips sample runs."""
    check = Check(
        name="QC ions",
        metric="expected_ion.*.found",
        applies_to=("QC_*.mzML",),
        critical=Condition(is_=False),
    )
    metrics = make_metrics(caffeine_found=False)
    status, findings = judge_at_t0(metrics, "QC_0413.mzML", [check], None)
    assert status is Status.CRITICAL
    assert findings[0].message == (
        "QC_0413.mzML: expected ion caffeine not found (critical) — check the QC standard, "
        "the column and the LC"
    )
    status, findings = judge_at_t0(metrics, "S01_liver.mzML", [check], None)
    assert (status, findings) == (Status.OK, ())


def test_regex_applies_to() -> None:
    """A re: pattern selects the runs the check judges."""
    check = Check(
        name="tic",
        metric="signal.tic_median",
        applies_to=("re:S\\d+_.*\\.mzML",),
        warning=Condition(below=5.0e6),
    )
    m = make_metrics()
    assert judge_at_t0(m, "S3_a.mzML", [check], None)[1]
    assert not judge_at_t0(m, "QC_3.mzML", [check], None)[1]


SIGNAL = Check(
    name="signal collapse",
    metric="signal.tic_median",
    against="baseline",
    baseline=BaselineSpec(runs=20, min_runs=5),
    critical=Condition(below_ratio=0.3),
)


def test_signal_drop_to_a_quarter_fires_below_ratio() -> None:
    """TIC at 25 % of the robust baseline fires below_ratio 0.3 (critical), 35 % does not."""
    tics = [1.0e6 + 1.0e4 * ((i * 7) % 5 - 2) for i in range(20)]  # median 1.0e6 (by hand)
    history = history_of("signal.tic_median", tics)
    status, findings = judge_at_t0(make_metrics(tic=2.5e5), "QC_0020.mzML", [SIGNAL], history)
    assert status is Status.CRITICAL
    (f,) = findings
    assert f.limit == "below 0.3 x baseline"
    assert f.baseline == "median 1 M, robust SD 14.8 k over 20 accepted runs"
    assert f.message == (
        "QC_0020.mzML: median TIC 250 k, 25 % of the baseline 1 M, below the 30 % limit "
        "(critical) — check the spray, the source and the LC flow"
    )
    _, findings = judge_at_t0(make_metrics(tic=3.5e5), "QC_0020.mzML", [SIGNAL], history)
    assert findings == ()


def test_baseline_uses_accepted_runs_of_the_same_kind_only() -> None:
    """Rejected runs and runs of another kind never enter the baseline."""
    check = Check(
        name="signal collapse",
        metric="signal.tic_median",
        applies_to=("QC_*",),
        baseline=BaselineSpec(runs=20, min_runs=5),
        critical=Condition(below_ratio=0.3),
    )
    good = history_of("signal.tic_median", [1.0e6] * 4).points["signal.tic_median"]
    bad = history_of("signal.tic_median", [2.0e5] * 10, status=Status.CRITICAL).points[
        "signal.tic_median"
    ]
    samples = history_of("signal.tic_median", [1.0e5] * 10, prefix="S1_").points[
        "signal.tic_median"
    ]
    mixed = sorted([*good, *bad, *samples], key=lambda p: p.acquired_at)
    history = ListHistory({"signal.tic_median": mixed})
    # 4 accepted QC runs < min_runs 5: no baseline, no finding.
    _, findings = judge_at_t0(make_metrics(tic=1.0e5), "QC_9.mzML", [check], history)
    assert findings == ()
    mixed.append(
        HistoryPoint(
            file_name="QC_x.mzML",
            acquired_at=T0 - timedelta(minutes=1),
            value=1.0e6,
            status=Status.NOTICE,
        )
    )
    _, findings = judge_at_t0(make_metrics(tic=1.0e5), "QC_9.mzML", [check], history)
    assert [f.baseline for f in findings] == ["median 1 M, robust SD 0 over 5 accepted runs"]


def test_for_runs_needs_the_previous_runs_too() -> None:
    """for_runs: 3 fires only when the two previous runs also broke the same condition."""
    check = Check(
        name="drift",
        metric="calibrant.siloxane-445.median_ppm",
        critical=Condition(above=3.0),
        for_runs=3,
    )
    m = make_metrics(siloxane_ppm=3.7)
    metric = "calibrant.siloxane-445.median_ppm"

    def run(values: list[float | bool | None]) -> tuple[Status, tuple[object, ...]]:
        return judge_at_t0(m, "QC_9.mzML", [check], history_of(metric, values))

    status, findings = run([1.0, 3.5, 3.6])
    assert status is Status.CRITICAL
    assert "for 3 runs in a row" in findings[0].message  # type: ignore[attr-defined]
    assert run([3.5, 1.0, 3.6]) == (Status.OK, ())  # broken chain
    assert run([3.6]) == (Status.OK, ())  # not enough history
    assert run([3.5, None, 3.6])[0] is Status.CRITICAL  # unmeasured runs are left out
    assert judge_at_t0(m, "QC_9.mzML", [check], None)[1] == ()


def test_for_runs_falls_back_to_a_lower_severity_that_persisted() -> None:
    """Critical only now, warning for three runs: the warning fires."""
    check = Check(
        name="drift",
        metric="calibrant.siloxane-445.median_ppm",
        warning=Condition(above=2.0),
        critical=Condition(above=5.0),
        for_runs=3,
    )
    _, findings = judge_at_t0(
        make_metrics(siloxane_ppm=5.5),
        "QC_9.mzML",
        [check],
        history_of("calibrant.siloxane-445.median_ppm", [2.5, 2.6]),
    )
    assert [f.severity for f in findings] == [Severity.WARNING]


WESTGARD = Check(
    name="drift trend",
    metric="calibrant.siloxane-445.median_ppm",
    baseline=BaselineSpec(mean=0.0, sd=1.0),
    westgard=("1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10x"),
    westgard_severity=Severity.WARNING,
)


@pytest.mark.parametrize(
    ("previous", "current", "rule", "severity"),
    [
        # Sequences built from the rule definitions in Westgard et al., Clin. Chem. 27 (1981).
        ([0.1], 2.5, "1-2s", Severity.NOTICE),  # the warning rule alone is a notice
        ([0.1], -3.3, "1-3s", Severity.WARNING),
        ([2.2], 2.4, "2-2s", Severity.WARNING),
        ([-2.2], 2.4, "R-4s", Severity.WARNING),
        ([1.2, 1.4, 1.1], 1.3, "4-1s", Severity.WARNING),
        ([0.2] * 9, 0.4, "10x", Severity.WARNING),
    ],
)
def test_westgard_through_the_judge(
    previous: list[float], current: float, rule: str, severity: Severity
) -> None:
    """Each Westgard rule fires on its pattern, with the lab's fixed mean and SD."""
    _, findings = judge_at_t0(
        make_metrics(siloxane_ppm=current),
        "QC_9.mzML",
        [WESTGARD],
        history_of("calibrant.siloxane-445.median_ppm", previous),
    )
    (f,) = findings
    assert (f.rule, f.severity) == (rule, severity)
    assert f.baseline == "lab mean +0.0 ppm, SD 1 ppm"
    assert "breaks Westgard" in f.message


def test_westgard_quiet_inside_limits() -> None:
    """An in-control sequence alternating around the mean fires no rule."""
    _, findings = judge_at_t0(
        make_metrics(siloxane_ppm=-0.3),
        "QC_9.mzML",
        [WESTGARD],
        history_of("calibrant.siloxane-445.median_ppm", [0.5, -0.4, 0.8, -1.2] * 3),
    )
    assert findings == ()


def test_ewma_and_cusum_findings() -> None:
    """A sustained +1.5 SD shift fires EWMA (lambda 0.2, L 3) and CUSUM (k 0.5, h 4)."""
    check = Check(
        name="drift trend",
        metric="calibrant.siloxane-445.median_ppm",
        baseline=BaselineSpec(mean=0.0, sd=1.0),
        ewma=EwmaSpec(lam=0.2, L=3.0),
        cusum=CusumSpec(k=0.5, h=4.0),
    )
    # Hand (NIST/SEMATECH e-Handbook 6.3.2.3): S_hi after n runs at z = 1.5 is n x (1.5 - 0.5):
    # 4 after four runs (not > h), 5 after five. EWMA after five runs at 1.5 from 0 is 1.00848
    # against the t=5 limit 3*sqrt((1-0.8^10)/9) = 0.94479 (6.3.2.4). After four runs: S_hi 4.0
    # and EWMA 1.5*(1-0.8^4) = 0.8856 against 3*sqrt((1-0.8^8)/9) = 0.91227: neither fires.
    history = history_of("calibrant.siloxane-445.median_ppm", [1.5] * 4)
    _, findings = judge_at_t0(make_metrics(siloxane_ppm=1.5), "QC_9.mzML", [check], history)
    assert [f.rule for f in findings] == ["ewma", "cusum"]
    assert "sustained upward shift: CUSUM 5.0 SD" in findings[1].message
    history = history_of("calibrant.siloxane-445.median_ppm", [1.5] * 3)
    _, findings = judge_at_t0(make_metrics(siloxane_ppm=1.5), "QC_9.mzML", [check], history)
    assert findings == ()


FORECAST = Check(
    name="calibration drift",
    metric="calibrant.siloxane-445.median_ppm",
    warning=Condition(outside=(-3.0, 3.0)),
    critical=Condition(outside=(-5.0, 5.0)),
    forecast=ForecastSpec(runs=10, warn_within_h=12.0, severity=Severity.NOTICE),
)


def test_forecast_on_a_linear_drift_through_the_judge() -> None:
    """+0.43 ppm/h from +2 ppm: critical +5 ppm in 3/0.43 = 7.0 h, reported within 10 %."""
    previous = [2.0 - 0.43 * (9 - i) for i in range(9)]  # hourly, ending 1 h before T0
    _, findings = judge_at_t0(
        make_metrics(siloxane_ppm=2.0),
        "QC_0412.mzML",
        [FORECAST],
        history_of("calibrant.siloxane-445.median_ppm", previous),
    )
    (f,) = findings
    assert f.rule == "forecast"
    assert f.severity is Severity.NOTICE
    assert f.forecast_h == pytest.approx(3.0 / 0.43, rel=0.10)  # hand: (5 - 2) / 0.43
    assert f.message == (
        "QC_0412.mzML: calibrant siloxane-445 median error reaches +5 ppm in about 7 h at the "
        "current rate (+0.43 ppm/h) — recalibrate before the next sample"
    )


def test_forecast_is_skipped_when_far_away_or_already_critical() -> None:
    """No forecast beyond warn_within_h, and none on a run that is already critical."""
    slow = [2.0 - 0.1 * (9 - i) for i in range(9)]  # 30 h to +5 ppm
    _, findings = judge_at_t0(
        make_metrics(siloxane_ppm=2.0),
        "QC_1.mzML",
        [FORECAST],
        history_of("calibrant.siloxane-445.median_ppm", slow),
    )
    assert findings == ()
    fast = [5.5 - 0.43 * (9 - i) for i in range(9)]
    _, findings = judge_at_t0(
        make_metrics(siloxane_ppm=5.5),
        "QC_1.mzML",
        [FORECAST],
        history_of("calibrant.siloxane-445.median_ppm", fast),
    )
    assert [f.rule for f in findings] == ["limit"]


def test_z_condition_message_reads_in_sd() -> None:
    """A z-score finding names the z, the baseline it came from and the SD limit."""
    check = Check(
        name="drift vs usual",
        metric="calibrant.siloxane-445.median_ppm",
        baseline=BaselineSpec(mean=0.2, sd=0.5),
        warning=Condition(z_outside=(-3.0, 3.0)),
    )
    _, (f,) = judge_at_t0(make_metrics(siloxane_ppm=2.0), "QC_0415.mzML", [check], None)
    # z = (2.0 - 0.2) / 0.5 = 3.6 (by hand)
    assert f.message == (
        "QC_0415.mzML: calibrant siloxane-445 median error +2.0 ppm, z = +3.6 against the "
        "baseline +0.2 ppm, beyond ±3 SD (warning) — recalibrate before the next sample"
    )
    assert f.baseline == "lab mean +0.2 ppm, SD 0.5 ppm"


@given(
    st.floats(-10.0, 10.0, allow_nan=False),
    st.floats(-10.0, 10.0, allow_nan=False),
    st.floats(0.0, 3.0e6, allow_nan=False),
)
def test_status_is_the_max_finding_severity(sil: float, leu: float, tic: float) -> None:
    """For any metrics, the status rank equals the highest finding rank (ok without findings)."""
    checks = [DRIFT, Check(name="tic", metric="signal.tic_median", notice=Condition(below=1.0e6))]
    status, findings = judge_at_t0(
        make_metrics(siloxane_ppm=sil, leu_enk_ppm=leu, tic=tic), "QC_1.mzML", checks, None
    )
    assert STATUS_RANK[status] == max((f.severity.rank for f in findings), default=0)
    assert len({(f.check, f.subject, f.rule) for f in findings}) == len(findings)


def test_forecast_uses_every_earlier_run_when_history_is_shorter_than_its_window() -> None:
    """With 4 earlier runs and an 8-run window, all 4 are fitted (5 points: enough to forecast)."""
    # Constructed: +0.5 ppm per hour, hourly, ending at +2.5 ppm; +5 ppm is (5 - 2.5) / 0.5 = 5 h
    # away (hand computation). Fewer earlier runs than the window once dropped the oldest ones.
    check = Check(
        name="calibration drift",
        metric="calibrant.siloxane-445.median_ppm",
        critical=Condition(outside=(-5.0, 5.0)),
        forecast=ForecastSpec(runs=8, warn_within_h=12.0, severity=Severity.NOTICE),
    )
    _, findings = judge_at_t0(
        make_metrics(siloxane_ppm=2.5),
        "S03.mzML",
        [check],
        history_of("calibrant.siloxane-445.median_ppm", [0.5, 1.0, 1.5, 2.0]),
    )
    (f,) = findings
    assert f.rule == "forecast"
    assert f.forecast_h == pytest.approx(5.0, rel=0.05)
