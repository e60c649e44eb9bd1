"""Alert item lines: check, subject, value and limit in words, from every kind of finding.

The limit texts are made by the rules' own ``limit_text`` (what ``Finding.limit`` holds), so a
new form there that the line cannot put into words fails here. Units and signs follow
``rules.finding_text`` (mass errors at 0.1 ppm with a sign: common practice for ppm errors).
"""

from __future__ import annotations

import dataclasses

import pytest

from tests.helpers.records import make_finding
from watcher.config.model import Condition
from watcher.notify.alert_text import (
    Item,
    item_line,
    item_lines,
    limit_words,
    notify_type,
    title_word,
)
from watcher.records import AlertAction, Severity
from watcher.rules.checks import limit_text
from watcher.rules.westgard import RULE_MEANING

PPM = "calibrant.leu-enk.median_ppm"
TIC = "signal.tic_median"


def _raise(**kw: object) -> Item:
    return Item(action=AlertAction.RAISE, finding=make_finding(Severity.CRITICAL, **kw))  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("metric", "field", "threshold", "words"),
    [
        (PPM, "outside", (-5.0, 5.0), "outside ±5 ppm"),
        (PPM, "inside", (-1.0, 2.0), "inside -1 ppm to +2 ppm"),
        (PPM, "above", 5.0, "above +5 ppm"),
        (TIC, "below", 1.0e5, "below 100 k"),
        (TIC, "below_ratio", 0.3, "below 30 % of the baseline"),
        (PPM, "diff_above", 2.0, "baseline difference above +2 ppm"),
        (PPM, "diff_outside", (-2.0, 2.0), "baseline difference outside ±2 ppm"),
        (PPM, "z_outside", (-3.0, 3.0), "outside ±3 SD of the baseline"),
        (PPM, "z_above", 2.0, "above +2 SD from the baseline"),
        ("calibrant.leu-enk.found_fraction", "below", 0.8, "below 80 %"),
        ("signal.longest_dropout_s", "above", 60.0, "above 60 s"),
    ],
)
def test_limit_words_for_every_condition_field(
    metric: str, field: str, threshold: float | tuple[float, float], words: str
) -> None:
    """Each condition field's ``Finding.limit`` text reads with the metric's unit."""
    assert field in {f.name for f in dataclasses.fields(Condition)}
    finding = make_finding(metric=metric, limit=limit_text(field, threshold))
    assert limit_words(finding) == words


def test_the_issue_example_line() -> None:
    """The line of the issue: ``calibration drift, leu-enk: +6.2 ppm, outside ±5 ppm``."""
    item = _raise(metric=PPM, value=6.23, limit=limit_text("outside", (-5.0, 5.0)))
    assert item_line(item, "QC_0412.mzML") == (
        "NEW critical: calibration drift, leu-enk: +6.2 ppm, outside ±5 ppm"
        " — recalibrate before the next sample"
    )


def test_persistence_westgard_trends_and_forecast_in_words() -> None:
    """``for N runs``, Westgard (meanings from Westgard et al., Clin. Chem. 27 (1981) 493-501),
    EWMA, CUSUM and the forecast each say what fired."""
    persist = make_finding(metric=PPM, limit=limit_text("outside", (-3.0, 3.0)) + " for 3 runs")
    assert limit_words(persist) == "outside ±3 ppm for 3 runs in a row"
    westgard = make_finding(metric=PPM, limit="Westgard 1-3s, 2-2s", rule="1-3s")
    assert limit_words(westgard) == f"breaks Westgard 1-3s, 2-2s ({RULE_MEANING['1-3s']})"
    assert RULE_MEANING["1-3s"] == "one run beyond 3 SD"
    ewma = make_finding(metric=PPM, limit="EWMA outside [-1.2, 1.2] (λ 0.2, L 3)", rule="ewma")
    assert limit_words(ewma) == "drifting: its EWMA left -1.2 ppm to +1.2 ppm"
    cusum = make_finding(metric=PPM, limit="CUSUM above h 5 (k 0.5)", rule="cusum")
    assert limit_words(cusum) == "sustained shift: CUSUM over 5 SD"
    forecast = make_finding(metric=PPM, limit="critical above 5", rule="forecast", forecast_h=7.2)
    assert (
        limit_words(forecast)
        == "reaches the critical limit +5 ppm in about 7 h at the current rate"
    )


def test_a_yes_no_check_says_found_or_not() -> None:
    """``is false`` on ``.found``: the value words say it; no empty limit."""
    item = _raise(
        check="QC ions",
        metric="expected_ion.caffeine.found",
        value=False,
        limit=limit_text("is", False),
    )
    assert item_line(item) == (
        "NEW critical: QC ions, caffeine: not found — check the QC standard, the column and the LC"
    )


def test_ok_again_lines_give_the_clearing_value_or_say_why_not() -> None:
    """The clearing run's value; ``not measured`` when it had none; the last value when the
    run did not measure the metric at all (a removed check)."""
    last = make_finding(Severity.CRITICAL, metric=PPM, value=6.2)
    now = Item(action=AlertAction.CLEAR, finding=last, now=0.31, now_known=True)
    assert item_line(now) == "OK AGAIN: calibration drift, leu-enk: +0.3 ppm, within limits again"
    none = Item(action=AlertAction.CLEAR, finding=last, now=None, now_known=True)
    assert item_line(none) == (
        "OK AGAIN: calibration drift, leu-enk: not measured in this run, the alert is closed"
    )
    gone = Item(action=AlertAction.CLEAR, finding=last)
    assert item_line(gone) == (
        "OK AGAIN: calibration drift, leu-enk: no longer checked (was +6.2 ppm)"
    )


def test_equal_lines_of_two_checks_merge_and_different_ones_do_not() -> None:
    """Same metric, value and limit from two checks: one line naming both; another value or
    another severity stays its own line."""
    limit = limit_text("outside", (-5.0, 5.0))
    a = _raise(check="drift", metric=PPM, value=6.2, limit=limit)
    b = _raise(check="lock mass", metric=PPM, value=6.2, limit=limit)
    c = _raise(check="tight", metric=PPM, value=6.2, limit=limit_text("outside", (-3.0, 3.0)))
    lines = item_lines([a, b, c, a])
    assert lines == [
        "NEW critical: drift + lock mass, leu-enk: +6.2 ppm, outside ±5 ppm"
        " — recalibrate before the next sample",
        "NEW critical: tight, leu-enk: +6.2 ppm, outside ±3 ppm"
        " — recalibrate before the next sample",
    ]


def test_title_and_type_follow_the_worst_open_item() -> None:
    """apprise NotifyType names: failure for critical, warning, info for notice, success when
    every item is an OK-again line."""
    warn = Item(action=AlertAction.RAISE, finding=make_finding(Severity.WARNING))
    notice = Item(action=AlertAction.REMIND, finding=make_finding(Severity.NOTICE))
    clear = Item(action=AlertAction.CLEAR, finding=make_finding(Severity.CRITICAL))
    assert (title_word([clear]), notify_type([clear])) == ("OK", "success")
    assert (title_word([clear, notice]), notify_type([clear, notice])) == ("NOTICE", "info")
    assert (title_word([notice, warn]), notify_type([notice, warn])) == ("WARNING", "warning")
    crit = _raise()
    assert (title_word([warn, crit, clear]), notify_type([crit])) == ("CRITICAL", "failure")
