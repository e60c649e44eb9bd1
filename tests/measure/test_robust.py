"""The project's order statistics against numpy's own: the same float, bit for bit.

Reference: numpy (``np.median``, ``np.quantile`` with its default ``linear`` method,
``np.percentile``), a general-purpose library from the registry. ``robust.median_of`` and
``robust.quantile_of`` exist so that a ``check`` does not import ``numpy.ma``; the metrics must
not move by one ulp for it.
"""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from watcher.measure import robust

finite = st.floats(allow_nan=False, allow_infinity=False, width=64, min_value=-1e12, max_value=1e12)
arrays = st.lists(finite, min_size=1, max_size=60).map(lambda v: np.asarray(v, dtype=np.float64))


def _same(ours: float, theirs: float) -> bool:
    return (math.isnan(ours) and math.isnan(theirs)) or ours == theirs


@settings(max_examples=400, deadline=None)
@given(arrays)
def test_median_of_equals_numpy_median(arr: np.ndarray) -> None:
    assert _same(robust.median_of(arr), float(np.median(arr)))


@settings(max_examples=400, deadline=None)
@given(arrays, st.floats(min_value=0.0, max_value=1.0))
def test_quantile_of_equals_numpy_quantile(arr: np.ndarray, q: float) -> None:
    assert _same(robust.quantile_of(arr, q), float(np.quantile(arr, q)))


@pytest.mark.parametrize("q", [0, 5, 25, 50, 75, 95, 99.5, 100])
def test_percentile_equals_numpy_percentile(q: float) -> None:
    rng = np.random.default_rng(7)
    for size in (1, 2, 3, 10, 101, 1000):
        values = rng.lognormal(10, 2, size)
        assert robust.percentile(values, q) == float(np.percentile(values, q))


@pytest.mark.parametrize("values", [[1.0, math.nan], [math.nan], [math.nan, 3.0, 2.0]])
def test_nan_gives_nan_as_numpy_does(values: list[float]) -> None:
    arr = np.asarray(values)
    assert math.isnan(robust.median_of(arr))
    assert math.isnan(float(np.median(arr)))
    assert math.isnan(robust.quantile_of(arr, 0.3))
    assert math.isnan(float(np.quantile(arr, 0.3)))


def test_measuring_a_run_does_not_import_numpy_ma() -> None:
    """np.median / np.quantile would pull numpy.ma in (about 10 ms of every check's start-up)."""
    code = (
        "import sys, numpy as np\n"
        "from watcher.measure import robust, signal, peaks\n"
        "x = np.linspace(100.0, 1000.0, 500)\n"
        "robust.median(x); robust.mad(x); robust.percentile(x, 90); robust.theil_sen_slope(x, x)\n"
        "signal.median_cycle_s(x); signal.working_tic(x, 0.1); peaks.looks_profile(x)\n"
        "print('numpy.ma' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


@pytest.mark.parametrize("q", [-0.01, 1.01, math.nan])
def test_a_quantile_outside_0_to_1_is_refused_as_numpy_refuses_it(q: float) -> None:
    arr = np.arange(5.0)
    with pytest.raises(ValueError, match=r"[Qq]uantile"):
        np.quantile(arr, q)
    with pytest.raises(ValueError, match="outside"):
        robust.quantile_of(arr, q)
