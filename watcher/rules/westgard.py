"""Westgard multi-rules on a sequence of z-scores whose last element is the current run.

Rule definitions after Westgard, Barry, Hunt and Groth, "A multi-rule Shewhart chart for quality
control in clinical chemistry", Clin. Chem. 27 (1981) 493-501. The paper applies R-4s within one
run across two control materials; with one QC value per run we apply it across the last two runs,
a common adaptation. 4-1s is evaluated on every run, not only after a 1-2s warning as in the
paper's scheme (a choice: four runs in a row at 1.5 SD are worth telling). "Beyond k SD" is strict
(``|z| > k``). A rule fires only when the current run
is part of the violating pattern, so an old violation does not fire again on every later run.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from collections.abc import Iterable, Sequence

# Reporting priority: the rejection rules for random error first, then systematic error, then the
# 1-2s warning rule (which alone only calls for inspection).
RULES: tuple[str, ...] = ("1-3s", "R-4s", "2-2s", "4-1s", "10x", "1-2s")

WARNING_RULE = "1-2s"

RULE_MEANING: dict[str, str] = {
    "1-2s": "one run beyond 2 SD",
    "1-3s": "one run beyond 3 SD",
    "2-2s": "two runs in a row beyond 2 SD on the same side",
    "R-4s": "the last two runs more than 4 SD apart, on opposite sides",
    "4-1s": "four runs in a row beyond 1 SD on the same side",
    "10x": "ten runs in a row on the same side of the mean",
}


def _same_side_beyond(z: Sequence[float], n: int, k: float) -> bool:
    if len(z) < n:
        return False
    tail = z[-n:]
    return all(v > k for v in tail) or all(v < -k for v in tail)


def rule_fires(rule: str, z: Sequence[float]) -> bool:
    """Whether ``rule`` is violated by a pattern that ends with the last element of ``z``.

    Args:
        rule: one of ``RULES``.
        z: standardised values, oldest first; ``z[-1]`` is the current run.

    Raises:
        ValueError: for an unknown rule name.
    """
    if not z:
        return False
    current = z[-1]
    if rule == "1-2s":
        return abs(current) > 2.0
    if rule == "1-3s":
        return abs(current) > 3.0
    if rule == "2-2s":
        return _same_side_beyond(z, 2, 2.0)
    if rule == "R-4s":
        if len(z) < 2:
            return False
        previous = z[-2]
        return (current > 2.0 and previous < -2.0) or (current < -2.0 and previous > 2.0)
    if rule == "4-1s":
        return _same_side_beyond(z, 4, 1.0)
    if rule == "10x":
        return _same_side_beyond(z, 10, 0.0)
    raise ValueError(f"unknown Westgard rule {rule!r} (known: {', '.join(RULES)})")


def violations(z: Sequence[float], rules: Iterable[str]) -> list[str]:
    """The selected rules that fire on ``z`` (current run last), in reporting priority order."""
    selected = set(rules)
    unknown = selected - set(RULES)
    if unknown:
        raise ValueError(f"unknown Westgard rule(s) {sorted(unknown)} (known: {', '.join(RULES)})")
    return [rule for rule in RULES if rule in selected and rule_fires(rule, z)]
