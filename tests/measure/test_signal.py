"""Signal metrics: counts, RT range, TIC and base peak, dropouts, cycle and injection times."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pytest

from tests.helpers.spectra import make_run, tic_scans
from watcher.config import SignalSettings
from watcher.measure.scan import Scan
from watcher.measure.signal import SignalTrace, find_dropouts

if TYPE_CHECKING:
    from watcher.records import SignalMetrics

# Constructed TIC trace, one MS1 scan per second from RT 0 (ground truth by construction):
# median 100; runs below 10 (0.1 x median): scans 10-12 (3 scans, next normal scan at 13 s),
# scan 18 (1 scan, next normal at 19 s) and scans 25-26 at the end (2 scans, no next scan).
DROPOUT_TRACE = [100.0] * 10 + [5.0] * 3 + [100.0] * 5 + [2.0] + [100.0] * 6 + [8.0, 9.0]


def _signal(scans: list[Scan], settings: SignalSettings | None = None) -> SignalMetrics:
    trace = SignalTrace()
    for scan in scans:
        trace.add(scan)
    return trace.summary(settings or SignalSettings())


def test_dropouts_counted_exactly() -> None:
    """Three runs of low-TIC scans are three dropouts; the longest lasts 3 s."""
    metrics = _signal(tic_scans(DROPOUT_TRACE), SignalSettings(dropout_fraction=0.1))
    # constructed trace (above): durations 3 s, 1 s and 2 scans x 1 s cycle at the end
    assert metrics.dropouts == 3
    assert metrics.longest_dropout_s == pytest.approx(3.0)
    assert metrics.tic_median == 100.0


def test_dropouts_respect_min_scans() -> None:
    """With dropout_min_scans 2 the single low scan no longer counts."""
    metrics = _signal(
        tic_scans(DROPOUT_TRACE), SignalSettings(dropout_fraction=0.1, dropout_min_scans=2)
    )
    # constructed trace (above): only the 3-scan and the 2-scan runs are long enough
    assert metrics.dropouts == 2
    assert metrics.longest_dropout_s == pytest.approx(3.0)


def test_dropout_at_run_end_sized_by_cycle() -> None:
    """A dropout that lasts to the end of the run lasts scans x median cycle."""
    tic = np.array([100.0] * 20 + [1.0] * 5)
    rt = np.arange(25, dtype=np.float64) * 2.0
    # constructed trace: 5 low scans, cycle 2 s
    assert find_dropouts(tic, rt, threshold=10.0, min_scans=1, cycle_s=2.0) == (1, 10.0)


def test_dropout_without_rt_and_without_cycle_has_no_duration() -> None:
    """Low scans without RT are still counted; their duration is unknown."""
    tic = np.array([100.0, 1.0, 100.0])
    rt = np.full(3, np.nan)
    assert find_dropouts(tic, rt, threshold=10.0, min_scans=1, cycle_s=None) == (1, None)


def test_no_dropout_gives_zero() -> None:
    """A steady trace has zero dropouts and longest_dropout_s 0."""
    metrics = _signal(tic_scans([100.0] * 30))
    assert metrics.dropouts == 0
    assert metrics.longest_dropout_s == 0.0


def test_dropouts_follow_rt_order_not_file_order() -> None:
    """Scans written out of RT order are ordered by RT before runs of low scans are found."""
    tics = [100.0, 100.0, 1.0, 100.0, 1.0, 100.0]
    rts = [0.0, 1.0, 2.0, 4.0, 3.0, 5.0]  # the two low scans are adjacent in RT (2 s and 3 s)
    metrics = _signal(tic_scans(tics, rt=rts))
    assert metrics.dropouts == 1
    assert metrics.longest_dropout_s == pytest.approx(2.0)


def test_counts_rt_range_cycle_and_injection_times() -> None:
    """A DDA run of 30 cycles reports its counts, RT range, cycle and injection-time medians."""
    scans = make_run(duration_s=60, cycle_s=2.0, ms2_per_cycle=3, noise_peaks=20)
    metrics = _signal(scans)
    # helpers/spectra.py ground truth: MS1 every 2 s from 1 s, 3 MS2 per cycle (charges 2, 3, 2)
    assert metrics.ms1_count == 30
    assert metrics.ms2_count == 90
    assert metrics.rt_start_s == 1.0
    assert metrics.rt_end_s == pytest.approx(59.0 + 1.5)
    assert metrics.cycle_time_s_median == pytest.approx(2.0)
    assert metrics.ms1_injection_time_ms_median == 20.0
    assert metrics.ms2_injection_time_ms_median == 50.0
    assert metrics.precursor_charges == ((2, 60), (3, 30))
    tics = [s.tic for s in scans if s.ms_level == 1]
    assert metrics.tic_median == pytest.approx(float(np.median(tics)))


def test_tic_and_base_peak_from_arrays_when_header_lacks_them() -> None:
    """Without header TIC/base peak, the intensity sum and maximum are used."""
    scan = Scan(
        index=0,
        ms_level=1,
        rt_s=1.0,
        tic=None,
        base_peak_mz=None,
        base_peak_intensity=None,
        mz=np.array([100.0, 200.0, 300.0]),
        intensity=np.array([1.0, 5.0, 2.0]),
    )
    metrics = _signal([scan])
    assert metrics.tic_median == 8.0
    assert metrics.bpi_median == 5.0


def test_header_tic_preferred_over_arrays() -> None:
    """A header TIC is reported even when it differs from the array sum."""
    scan = Scan(
        index=0,
        ms_level=1,
        rt_s=1.0,
        tic=15245068.0,
        base_peak_mz=None,
        base_peak_intensity=1471973.875,
        mz=np.array([100.0, 200.0]),
        intensity=np.array([1.0, 5.0]),
    )
    metrics = _signal([scan])
    # tests/data/README.md pitfall 6: test.mzML header TIC differs from its array sum
    assert metrics.tic_median == 15245068.0
    assert metrics.bpi_median == 1471973.875


def test_tic_quantile_rts_on_gaussian_elution() -> None:
    """A Gaussian TIC elution centred at 300 s has its 25/50/75 % RTs at 300 -/+ 0.674 sigma."""
    rt = np.arange(0.0, 600.0, 1.0)
    sigma_s = 40.0
    tics = 1e6 * np.exp(-0.5 * ((rt - 300.0) / sigma_s) ** 2) + 1.0
    metrics = _signal(tic_scans(list(tics), cycle_s=1.0))
    # standard normal quartiles +-0.6745 (published normal tables); tolerance one cycle
    assert metrics.tic_rt50_s == pytest.approx(300.0, abs=1.0)
    assert metrics.tic_rt25_s == pytest.approx(300.0 - 0.6745 * sigma_s, abs=1.0)
    assert metrics.tic_rt75_s == pytest.approx(300.0 + 0.6745 * sigma_s, abs=1.0)


def test_run_without_ms1_reports_counts_and_nulls() -> None:
    """An MGF-like run (MS level unknown) counts its spectra as MS2 and has no MS1 metrics."""
    scans = [
        Scan(index=i, ms_level=None, rt_s=None, tic=None, base_peak_mz=None,
             base_peak_intensity=None, precursor_charge=2 if i else None)
        for i in range(3)
    ]  # fmt: skip
    metrics = _signal(scans)
    assert metrics.ms1_count == 0
    assert metrics.ms2_count == 3
    assert metrics.rt_start_s is None
    assert metrics.tic_median is None
    assert metrics.dropouts is None
    assert metrics.longest_dropout_s is None
    assert metrics.cycle_time_s_median is None
    assert metrics.precursor_charges == ((0, 1), (2, 2))


@pytest.mark.parametrize("failed_fraction", [0.10, 0.49, 0.60, 0.90])
def test_a_spray_failure_of_most_of_the_run_is_a_dropout(failed_fraction: float) -> None:
    """100 MS1 scans, 1 s apart; from scan 100 x (1 - f) on the TIC falls to 1 % of normal.

    Ground truth by construction: one dropout lasting f x 100 s. Measured against the run's own
    median TIC, a failure of half the run or more hid itself (the median fell with it)."""
    n_failed = round(100 * failed_fraction)
    rng = np.random.default_rng(7)
    normal = 1.0e6 * (1.0 + 0.05 * rng.standard_normal(100 - n_failed))
    tics = [*normal, *([1.0e4] * n_failed)]
    metrics = _signal(tic_scans(tics), SignalSettings(dropout_fraction=0.1))
    assert metrics.dropouts == 1
    assert metrics.longest_dropout_s == pytest.approx(float(n_failed), abs=1e-9)


def test_a_run_without_failure_keeps_the_median_reference() -> None:
    """An intense elution (5x the rest, 10 % of the scans) in a steady run does not raise the
    threshold: no dropout in the quiet part, as with the run's median."""
    tics = [1.0e6] * 80 + [5.0e6] * 10 + [1.0e6] * 10
    metrics = _signal(tic_scans(tics), SignalSettings(dropout_fraction=0.1))
    assert metrics.dropouts == 0


def _dda_run(fail_start_s: float, fail_s: float, run_s: float = 600.0) -> list[Scan]:
    """DDA: an MS1 scan every 1.0 s (MS2 scans fill the cycle) while the spray works; while it is
    out there are no precursors, so MS1 scans follow every 0.15 s."""
    rts: list[float] = []
    tics: list[float] = []
    t = 0.0
    while t < run_s:
        failed = fail_start_s <= t < fail_start_s + fail_s
        rts.append(t)
        tics.append(1.0e4 if failed else 1.0e6)
        t += 0.15 if failed else 1.0
    return tic_scans(tics, rt=rts)


@pytest.mark.parametrize("where", ["start", "middle", "end"])
def test_a_dropout_is_sized_by_its_own_scans_wherever_it_is(where: str) -> None:
    """A 30 s spray failure lasts 30 s (within one fast cycle) at the start, in the middle and at
    the end of the run; the run's median cycle (1 s) x the fast low scans gave ~200 s at the end."""
    start_s = {"start": 0.0, "middle": 300.0, "end": 570.0}[where]
    metrics = _signal(_dda_run(start_s, 30.0), SignalSettings(dropout_fraction=0.1))
    assert metrics.dropouts == 1
    assert metrics.longest_dropout_s == pytest.approx(30.0, abs=0.3)
