"""Westgard multi-rules against their published definitions.

Source for every rule: Westgard, Barry, Hunt, Groth, "A multi-rule Shewhart chart for quality
control in clinical chemistry", Clin. Chem. 27 (1981) 493-501 (rule definitions from memory of
that paper; R-4s applied across the last two runs, a common adaptation of its within-run form).
Sequences are z-scores, oldest first, the last one being the current run.
"""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from watcher.rules.westgard import RULES, rule_fires, violations

FIRES = [
    ("1-2s", [0.1, 2.5]),  # one control beyond 2 SD (Westgard 1981)
    ("1-2s", [0.1, -2.01]),
    ("1-3s", [0.0, -3.2]),  # one control beyond 3 SD (Westgard 1981)
    ("2-2s", [2.1, 2.3]),  # two consecutive beyond the same 2 SD limit (Westgard 1981)
    ("2-2s", [-2.4, -2.1]),
    ("R-4s", [-2.1, 2.2]),  # one beyond +2 SD, the other beyond -2 SD (Westgard 1981)
    ("R-4s", [2.5, -2.05]),
    ("4-1s", [1.2, 1.5, 1.1, 1.3]),  # four consecutive beyond the same 1 SD limit (Westgard 1981)
    ("4-1s", [-1.2, -1.5, -1.1, -1.3]),
    ("10x", [0.3] * 10),  # ten consecutive on the same side of the mean (Westgard 1981)
    ("10x", [0.5, *([-0.2] * 10)]),
]

DOES_NOT_FIRE = [
    ("1-2s", [2.5, 0.1]),  # the violation is in an earlier run, not the current one
    ("1-2s", [1.99]),
    ("1-3s", [2.9]),
    ("1-3s", [3.5, 0.2]),
    ("2-2s", [2.1, -2.3]),  # beyond 2 SD twice, but on opposite sides
    ("2-2s", [2.5, 1.9]),
    ("2-2s", [2.5]),  # a single run cannot make a pair
    ("R-4s", [-2.1, 1.9]),  # only one of the two is beyond 2 SD
    ("R-4s", [2.1, 2.2]),  # same side: that is 2-2s, not a range
    ("R-4s", [-2.5, 2.5, 0.0]),  # the pattern ended before the current run
    ("4-1s", [1.2, 1.5, 0.9, 1.3]),
    ("4-1s", [-1.2, 1.5, 1.1, 1.3]),
    ("4-1s", [1.2, 1.5, 1.1, 1.3, 0.2]),
    ("10x", [0.3] * 9),  # only nine runs
    ("10x", [*([0.3] * 9), -0.1]),
    ("10x", [*([0.3] * 9), 0.0]),  # exactly on the mean is on neither side
]


@pytest.mark.parametrize(("rule", "z"), FIRES)
def test_rule_fires_on_its_published_pattern(rule: str, z: list[float]) -> None:
    """Each rule fires on a sequence that ends with its defining pattern."""
    assert rule_fires(rule, z)


@pytest.mark.parametrize(("rule", "z"), DOES_NOT_FIRE)
def test_rule_does_not_fire_without_the_current_run_in_the_pattern(
    rule: str, z: list[float]
) -> None:
    """Each rule stays quiet when the pattern is incomplete or ended before the current run."""
    assert not rule_fires(rule, z)


def test_violations_lists_selected_rules_in_priority_order() -> None:
    """Only the selected rules are reported, rejection rules before the 1-2s warning rule."""
    z = [2.2, 3.4]  # 1-2s, 1-3s and 2-2s all hold (Westgard 1981 definitions)
    assert violations(z, ["1-2s", "2-2s", "1-3s"]) == ["1-3s", "2-2s", "1-2s"]
    assert violations(z, ["10x"]) == []


def test_unknown_rule_name_is_refused() -> None:
    """A misspelt rule name is an error naming the known rules, not a silent no-op."""
    with pytest.raises(ValueError, match="1-3s"):
        violations([0.0], ["1-5s"])


def test_all_six_rules_are_known() -> None:
    """The rule set is the six of the 1981 multi-rule chart."""
    assert sorted(RULES) == sorted(["1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10x"])


@given(st.lists(st.floats(-6.0, 6.0, allow_nan=False), min_size=1, max_size=12))
def test_rules_are_symmetric_about_the_mean(z: list[float]) -> None:
    """Mirroring every run about the mean fires exactly the same rules (both-sided definitions)."""
    assert violations(z, RULES) == violations([-v for v in z], RULES)
