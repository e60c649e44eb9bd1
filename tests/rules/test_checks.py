"""``*`` expansion of metric paths, and condition truth tables."""

from __future__ import annotations

import pytest

from watcher.config import Condition
from watcher.rules.baseline import Baseline
from watcher.rules.checks import critical_bounds, evaluate, expand, limit_text

PATHS = [
    "signal.tic_median",
    "calibrant.siloxane-445.median_ppm",
    "calibrant.siloxane-445.mad_ppm",
    "calibrant.leu-enk.median_ppm",
    "expected_ion.caffeine.found",
]


def test_star_expands_to_one_path_per_calibrant() -> None:
    """calibrant.*.median_ppm names every calibrant's median error and nothing else."""
    assert expand("calibrant.*.median_ppm", PATHS) == [
        "calibrant.siloxane-445.median_ppm",
        "calibrant.leu-enk.median_ppm",
    ]


def test_plain_path_expands_to_itself_only_when_measured() -> None:
    """A path without '*' is kept when the run has it and dropped when it does not."""
    assert expand("signal.tic_median", PATHS) == ["signal.tic_median"]
    assert expand("calibrant.lockspray.median_ppm", PATHS) == []


BASE = Baseline(centre=1.0e6, sd=1.0e5, n_runs=20, is_fixed=False)


@pytest.mark.parametrize(
    ("condition", "value", "field"),
    [
        (Condition(above=3.0), 3.1, "above"),
        (Condition(above=3.0), 3.0, None),  # strict: at the limit is not above it
        (Condition(below=-3.0), -3.5, "below"),
        (Condition(outside=(-5.0, 5.0)), 5.8, "outside"),
        (Condition(outside=(-5.0, 5.0)), -5.01, "outside"),
        (Condition(outside=(-5.0, 5.0)), 4.99, None),
        (Condition(inside=(0.0, 0.5)), 0.2, "inside"),
        (Condition(inside=(0.0, 0.5)), 0.7, None),
        (Condition(is_=False), False, "is"),
        (Condition(is_=False), True, None),
        (Condition(is_=False), 0.0, None),  # is: compares booleans only
        (Condition(above=0.5), True, None),  # numeric limits ignore booleans
        (Condition(above=3.0), None, None),  # not measured: nothing holds
        (Condition(above=3.0), float("nan"), None),
        (Condition(below_ratio=0.3), 2.5e5, "below_ratio"),  # 25 % of the centre
        (Condition(below_ratio=0.3), 3.5e5, None),
        (Condition(above_ratio=2.0), 2.1e6, "above_ratio"),
        (Condition(diff_above=2.0e5), 1.25e6, "diff_above"),
        (Condition(diff_below=-2.0e5), 7.0e5, "diff_below"),
        (Condition(diff_outside=(-2.0e5, 2.0e5)), 1.3e6, "diff_outside"),
        (Condition(z_above=3.0), 1.35e6, "z_above"),  # z = 3.5
        (Condition(z_below=-3.0), 6.0e5, "z_below"),  # z = -4
        (Condition(z_outside=(-3.0, 3.0)), 1.2e6, None),  # z = 2
    ],
)
def test_condition_truth_table(
    condition: Condition, value: float | bool | None, field: str | None
) -> None:
    """Each condition field holds exactly on its side of the threshold (strict inequalities)."""
    hit = evaluate(condition, value, BASE)
    assert (hit.field if hit else None) == field


def test_baseline_fields_need_a_baseline() -> None:
    """Ratio, difference and z conditions do not hold when there is no baseline yet."""
    assert evaluate(Condition(below_ratio=0.3), 1.0, None) is None
    assert (
        evaluate(
            Condition(z_above=3.0), 1.0e9, Baseline(centre=1.0, sd=0.0, n_runs=5, is_fixed=False)
        )
        is None
    )


def test_first_holding_field_is_reported() -> None:
    """With several fields set, the first one that holds (declaration order) is the hit."""
    hit = evaluate(Condition(above=10.0, outside=(-5.0, 5.0)), 6.0)
    assert hit is not None
    assert hit.field == "outside"
    assert hit.limit == "outside [-5, 5]"


@pytest.mark.parametrize(
    ("field", "threshold", "text"),
    [
        ("below_ratio", 0.3, "below 0.3 x baseline"),
        ("z_outside", (-3.0, 3.0), "z outside [-3, 3]"),
        ("is", False, "is false"),
        ("above", 1.0e5, "above 100000"),
    ],
)
def test_limit_text(field: str, threshold: float | tuple[float, float] | bool, text: str) -> None:
    """Finding.limit names the field and the configured threshold."""
    assert limit_text(field, threshold) == text


def test_critical_bounds_for_forecast() -> None:
    """The forecast heads for the tighter of above/outside and below/outside."""
    assert critical_bounds(Condition(outside=(-5.0, 5.0))) == (5.0, -5.0)
    assert critical_bounds(Condition(above=4.0, outside=(-5.0, 5.0))) == (4.0, -5.0)
    assert critical_bounds(Condition(below_ratio=0.3)) == (None, None)
    assert critical_bounds(None) == (None, None)
