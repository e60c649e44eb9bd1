"""EWMA and CUSUM over the whole history: the statistics carried from run to run in the store.

Reference: NIST/SEMATECH e-Handbook of Statistical Methods, sections 6.3.2.3 (CUSUM, tabular
form: S_hi = max(0, S_hi + z - k)) and 6.3.2.4 (EWMA), computed here by hand over the full series.
"""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING

import numpy as np

from tests.helpers.records import make_metrics
from watcher.config import BaselineSpec, Check, CusumSpec, EwmaSpec
from watcher.records import RunFile, Verdict
from watcher.rules.judge import judge
from watcher.store import db, history

if TYPE_CHECKING:
    from pathlib import Path

T0 = datetime(2026, 5, 1, tzinfo=UTC)
PATH = "calibrant.siloxane-445.median_ppm"


def _judge_series(state_dir: Path, values: list[float], check: Check) -> list[list[str]]:
    """Judge and record each value as one run, in order; the rules fired for each run."""
    conn = db.connect(state_dir, daemon=True)
    fired: list[list[str]] = []
    for i, value in enumerate(values):
        at = T0 + timedelta(minutes=30 * i)
        name = f"QC_{i:04d}.mzML"
        metrics = make_metrics(file=name, siloxane_ppm=value, acquired_at=at)
        judged = judge(
            metrics,
            file_name=name,
            acquired_at=at,
            checks=(check,),
            history=history.StoreHistory(conn),
        )
        fired.append([f.rule for f in judged.findings])
        with db.write(conn):
            history.record_verdict(
                conn,
                Verdict(
                    run_file=RunFile(path=state_dir / name, size=1, mtime_ns=i, sha256=str(i)),
                    status=judged.status,
                    acquired_at=at,
                    metrics=metrics,
                    findings=judged.findings,
                    trend_states=judged.trend_states,
                    judged_at=at,
                ),
            )
    conn.close()
    return fired


def test_cusum_adds_up_a_shift_just_above_k_over_the_whole_history(tmp_path: Path) -> None:
    """A constant +0.55 SD shift with k 0.5, h 5: the handbook's S_hi grows 0.05 a run and
    crosses h at the 101st run. A 51-run window caps it at 2.55, so it never fired."""
    check = Check(
        name="drift cusum",
        metric=PATH,
        baseline=BaselineSpec(mean=0.0, sd=1.0),
        cusum=CusumSpec(k=0.5, h=5.0),
    )
    fired = _judge_series(tmp_path / "state", [0.55] * 120, check)
    first = next(i for i, rules in enumerate(fired) if "cusum" in rules)
    # S_hi after n runs = 0.05 n (exact in binary up to rounding): > 5 first at n = 101.
    assert first + 1 in (101, 102)
    assert all("cusum" in rules for rules in fired[first:])


def test_carried_ewma_equals_the_handbook_formula_over_the_full_series(tmp_path: Path) -> None:
    """z_t = lam x_t + (1 - lam) z_(t-1) from z_0 = target over all 200 runs, limits with the
    (1 - (1 - lam)^(2t)) start-up factor: the stored state after the last run matches it."""
    rng = np.random.default_rng(9)
    values = list(0.2 * rng.standard_normal(200) + np.linspace(0.0, 0.6, 200))
    lam, width = 0.1, 3.0
    check = Check(
        name="drift ewma",
        metric=PATH,
        baseline=BaselineSpec(mean=0.0, sd=0.25),
        ewma=EwmaSpec(lam=lam, L=width),
    )
    fired = _judge_series(tmp_path / "state", values, check)
    z = 0.0
    expected_out = []
    for t, x in enumerate(values, start=1):
        z = lam * x + (1.0 - lam) * z
        half = width * 0.25 * np.sqrt(lam / (2.0 - lam) * (1.0 - (1.0 - lam) ** (2 * t)))
        expected_out.append(abs(z) > half)
    conn = db.connect(tmp_path / "state", readonly=True)
    state = history.StoreHistory(conn).trend_state(
        "drift ewma", PATH, before=T0 + timedelta(days=365)
    )
    conn.close()
    assert state is not None
    assert state.n_runs == 200
    assert state.ewma is not None
    assert abs(state.ewma - z) < 1e-9
    assert [("ewma" in rules) for rules in fired] == expected_out


def test_a_changed_setting_restarts_the_statistics(tmp_path: Path) -> None:
    """A state made under other CUSUM settings is not continued: the sums start again from the
    recent window (51 runs), where the same settings continue the 60-run state to 61."""
    values = [0.55] * 60
    base = Check(name="c", metric=PATH, baseline=BaselineSpec(mean=0.0, sd=1.0), cusum=CusumSpec())
    _judge_series(tmp_path / "state", values, base)
    conn = db.connect(tmp_path / "state", readonly=True)
    at = T0 + timedelta(minutes=30 * 60)
    metrics = make_metrics(file="QC_next.mzML", siloxane_ppm=0.55, acquired_at=at)
    store = history.StoreHistory(conn)

    def carried(check: Check) -> tuple[int, float | None]:
        (state,) = judge(
            metrics, file_name="QC_next.mzML", acquired_at=at, checks=(check,), history=store
        ).trend_states
        return state.n_runs, state.cusum_hi

    same_n, same_hi = carried(base)
    other_n, _ = carried(replace(base, cusum=CusumSpec(k=0.4)))
    conn.close()
    assert same_n == 61
    assert same_hi is not None
    assert abs(same_hi - 0.05 * 61) < 1e-9
    assert other_n == 51
