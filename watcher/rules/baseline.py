"""A check's baseline: robust centre and spread of recent accepted runs, or the lab's values.

Robust statistics (median and 1.4826 x MAD) are used instead of mean and SD so that one bad run
that slipped into the accepted history does not drag the baseline towards itself.
"""

from __future__ import annotations

import math
import statistics
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from collections.abc import Sequence

    from watcher.config import BaselineSpec

# 1 / Phi^-1(3/4): for normally distributed data, MAD x 1.4826 estimates the SD (common practice).
MAD_TO_SD = 1.4826


@dataclass(frozen=True, slots=True, kw_only=True)
class Baseline:
    """Centre and spread a value is compared with.

    Attributes:
        centre: the robust centre (median) or the lab's mean, in the metric's unit.
        sd: the robust SD (1.4826 x MAD) or the lab's SD; may be 0 when history is constant.
        n_runs: accepted runs the statistics came from; 0 when both values are fixed in the config.
        is_fixed: both centre and SD come from the config.
    """

    centre: float
    sd: float
    n_runs: int
    is_fixed: bool

    def z(self, value: float) -> float | None:
        """(value - centre) / sd, or None when the spread is zero (no z-score is defined)."""
        if self.sd <= 0.0:
            return None
        return (value - self.centre) / self.sd


def robust_centre_sd(values: Sequence[float]) -> tuple[float, float]:
    """Median and MAD-based SD (1.4826 x median absolute deviation) of a non-empty sample."""
    if not values:
        raise ValueError("robust_centre_sd needs at least one value")
    centre = statistics.median(values)
    mad = statistics.median(abs(v - centre) for v in values)
    return centre, MAD_TO_SD * mad


def from_spec(spec: BaselineSpec, accepted_values: Sequence[float]) -> Baseline | None:
    """The baseline for a check, or None when there is not enough history yet.

    Fixed ``mean`` and ``sd`` from the config win. A value missing from the config is taken from
    the robust statistics of ``accepted_values`` (the last ``spec.runs`` accepted runs of the same
    kind, oldest first); that needs at least ``spec.min_runs`` of them, otherwise there is no
    baseline and the caller skips every baseline-relative rule for this run (documented choice:
    no finding rather than a guess from two or three runs).
    """
    if spec.mean is not None and spec.sd is not None:
        return Baseline(centre=spec.mean, sd=spec.sd, n_runs=0, is_fixed=True)
    values = [v for v in accepted_values[-spec.runs :] if math.isfinite(v)] if spec.runs else []
    if len(values) < max(spec.min_runs, 1):
        return None
    centre, sd = robust_centre_sd(values)
    return Baseline(
        centre=spec.mean if spec.mean is not None else centre,
        sd=spec.sd if spec.sd is not None else sd,
        n_runs=len(values),
        is_fixed=False,
    )
