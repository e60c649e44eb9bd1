"""Judge one run: the applicable checks on its metrics and history, into findings and a status.

Pure: the history is passed in (``History`` protocol; ``watcher.store.history.StoreHistory`` reads
it from SQLite). Per check and concrete metric path the judge produces at most one finding of each
family: the limit (severities tried critical first, the highest that holds wins), Westgard, EWMA,
CUSUM and forecast.

History semantics (documented choices):

- "Same kind" = earlier runs whose file name matches the check's own ``applies_to``.
- The baseline uses only ACCEPTED runs (status ok or notice); Westgard, EWMA, CUSUM, ``for_runs``
  and the forecast use every earlier run of the same kind with a value, because a run that failed
  is still a measurement of the instrument.
- Runs without a value for the metric are left out of every sequence.
- A run without MS1 spectra has no calibrant, expected-ion or mass-correction values at all.
- ``for_runs: N`` re-evaluates the same severity's condition on the previous N-1 values with the
  baseline as it is now; with too little history (or no history at all) it does not fire.
- Westgard, EWMA and CUSUM need a baseline with SD > 0 (fixed mean/sd, or enough accepted runs);
  without one they are skipped. EWMA and CUSUM carry their statistics from run to run (the state
  the last earlier run of the same check and metric left, ``History.trend_state``), so they span
  the whole history and CUSUM adds up a shift just above k; without a state (the first run, or
  after the check's EWMA/CUSUM/baseline settings changed) they start from the baseline centre
  over the last ``TREND_RUNS`` runs + this one.
- Westgard, EWMA and CUSUM findings take ``check.westgard_severity`` (1-2s alone: notice); the
  forecast takes ``check.forecast.severity`` and is skipped when the run is already critical on
  its limit. It fits the last ``forecast.runs`` runs (this one included; at least 5 after the
  last step change) against acquisition time and heads for the critical ``above``/``below``/
  ``outside`` limit.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Protocol

from watcher.config import Check, Condition, matches_applies_to
from watcher.records import (
    STATUS_RANK,
    Finding,
    HistoryPoint,
    Judgement,
    RunMetrics,
    Severity,
    Status,
    TrendState,
)
from watcher.rules import finding_text as messages
from watcher.rules import trend, westgard
from watcher.rules.baseline import Baseline, from_spec
from watcher.rules.checks import (
    critical_bounds,
    evaluate,
    expand,
    is_missing,
    needs_baseline,
)

if TYPE_CHECKING:
    from collections.abc import Sequence

TREND_RUNS = 50  # earlier runs fed to EWMA and CUSUM
WESTGARD_RUNS = 9  # 10x needs the nine runs before this one
# metric paths measured from MS1 spectra only
MS1_ONLY_PREFIXES = ("calibrant.", "expected_ion.", "expected_ions.", "mass_correction.")


class History(Protocol):
    """Earlier runs' values of one metric, and the trend statistics they left."""

    def series(self, metric: str, *, before: datetime, limit: int) -> Sequence[HistoryPoint]:
        """Oldest first: at most ``limit`` most recent runs acquired strictly before ``before``."""
        ...

    def trend_state(self, check: str, path: str, *, before: datetime) -> TrendState | None:
        """The EWMA/CUSUM state stored with the latest run acquired before ``before``."""
        ...


def _points(
    history: History,
    metric: str,
    *,
    before: datetime,
    applies_to: Sequence[str],
    limit: int,
    accepted_only: bool,
) -> list[HistoryPoint]:
    """The last ``limit`` points of the same kind with a value, oldest first.

    The History may hold runs of other kinds and rejected runs, so fetch more until enough
    matching points were found or the history has no more.
    """
    if limit <= 0:
        return []
    fetch = limit
    while True:
        raw = list(history.series(metric, before=before, limit=fetch))
        kept = [
            p
            for p in raw
            if not is_missing(p.value)
            and matches_applies_to(applies_to, p.file_name)
            and (not accepted_only or p.status.accepted)
        ]
        if len(kept) >= limit or len(raw) < fetch:
            return kept[-limit:]
        fetch *= 4


def _hours(at: datetime, ref: datetime) -> float:
    return (_utc(at) - _utc(ref)).total_seconds() / 3600.0


def _utc(at: datetime) -> datetime:
    # Naive timestamps (files without a zone) are taken as UTC, as the store does.
    return at.replace(tzinfo=UTC) if at.tzinfo is None else at


@dataclass(frozen=True, slots=True, kw_only=True)
class _Context:
    check: Check
    path: str
    value: float | bool
    file_name: str
    acquired_at: datetime
    baseline: Baseline | None
    recent: list[HistoryPoint]  # same kind, any status, oldest first
    previous: TrendState | None = None  # the EWMA/CUSUM state the last earlier run left


def _needs_baseline(check: Check) -> bool:
    conds = (check.notice, check.warning, check.critical)
    return (
        check.against == "baseline"
        or any(needs_baseline(c) for c in conds)
        or bool(check.westgard)
        or check.ewma is not None
        or check.cusum is not None
    )


def _recent_limit(check: Check) -> int:
    n = check.for_runs - 1
    if check.westgard:
        n = max(n, WESTGARD_RUNS)
    if check.ewma is not None or check.cusum is not None:
        n = max(n, TREND_RUNS)
    if check.forecast is not None:
        n = max(n, check.forecast.runs - 1)
    return n


def _limit_finding(ctx: _Context) -> Finding | None:
    check, value = ctx.check, ctx.value
    levels: tuple[tuple[Severity, Condition | None], ...] = (
        (Severity.CRITICAL, check.critical),
        (Severity.WARNING, check.warning),
        (Severity.NOTICE, check.notice),
    )
    for severity, condition in levels:
        if condition is None:
            continue
        hit = evaluate(condition, value, ctx.baseline)
        if hit is None:
            continue
        if check.for_runs > 1:
            previous = ctx.recent[-(check.for_runs - 1) :]
            if len(previous) < check.for_runs - 1 or any(
                evaluate(condition, p.value, ctx.baseline) is None for p in previous
            ):
                continue
        return Finding(
            check=check.name,
            severity=severity,
            metric=ctx.path,
            subject=ctx.path,
            message=messages.limit_message(
                ctx.file_name,
                ctx.path,
                value,
                hit,
                severity,
                baseline=ctx.baseline,
                for_runs=check.for_runs,
            ),
            value=value,
            limit=hit.limit + (f" for {check.for_runs} runs" if check.for_runs > 1 else ""),
            rule="limit",
            baseline=_baseline_text(ctx) if _uses_baseline(hit.field) else None,
        )
    return None


def _uses_baseline(field: str) -> bool:
    return field.endswith("_ratio") or field.startswith(("diff_", "z_"))


def _baseline_text(ctx: _Context) -> str | None:
    return messages.baseline_text(ctx.path, ctx.baseline) if ctx.baseline else None


def _sequence(ctx: _Context) -> list[float]:
    """History values of the same kind + the current value, oldest first (numbers only)."""
    return [*_numbers(ctx.recent), float(ctx.value)]


def _last(items: list[HistoryPoint], n: int) -> list[HistoryPoint]:
    """The last ``n`` items (none for n <= 0; a plain ``items[-n:]`` gives all of them for 0)."""
    return items[max(0, len(items) - n) :] if n > 0 else []


def _is_number(value: float | bool | None) -> bool:
    return isinstance(value, float | int) and not isinstance(value, bool)


def _numbers(points: Sequence[HistoryPoint]) -> list[float]:
    return [
        float(p.value) for p in points if isinstance(p.value, float | int) and _is_number(p.value)
    ]


def _trend(ctx: _Context, severity: Severity, message: str, limit: str, rule: str) -> Finding:
    return Finding(
        check=ctx.check.name,
        severity=severity,
        metric=ctx.path,
        subject=ctx.path,
        message=message,
        value=ctx.value,
        limit=limit,
        rule=rule,
        baseline=_baseline_text(ctx),
    )


def trend_spec(check: Check) -> str:
    """The settings a carried EWMA/CUSUM state depends on; a change restarts the statistics."""
    ewma = f"ewma {check.ewma.lam:g} {check.ewma.L:g}" if check.ewma else "ewma -"
    cusum = f"cusum {check.cusum.k:g}" if check.cusum else "cusum -"
    b = check.baseline
    return f"{ewma}; {cusum}; baseline {b.runs} {b.min_runs} {b.mean} {b.sd}"


def _carried(ctx: _Context) -> TrendState | None:
    prev = ctx.previous
    return prev if prev is not None and prev.spec == trend_spec(ctx.check) else None


def _ewma_now(ctx: _Context, b: Baseline, xs: list[float]) -> tuple[trend.EwmaPoint, int]:
    """This run's EWMA point and the runs it has seen: continued from the last run's state
    (the whole history), else started from the baseline centre over the recent window."""
    spec = ctx.check.ewma
    assert spec is not None  # noqa: S101 - the caller checked
    prev = _carried(ctx)
    if prev is None or prev.ewma is None:
        window = xs[-(TREND_RUNS + 1) :]
        return trend.ewma(window, mean=b.centre, sd=b.sd, lam=spec.lam, L=spec.L)[-1], len(window)
    n = prev.n_runs + 1
    z = spec.lam * float(ctx.value) + (1.0 - spec.lam) * prev.ewma
    return trend.ewma_point(z, n, mean=b.centre, sd=b.sd, lam=spec.lam, L=spec.L), n


def _cusum_now(ctx: _Context, b: Baseline, xs: list[float]) -> tuple[trend.CusumPoint, int]:
    """This run's CUSUM sums, continued from the last run's (the handbook's tabular CUSUM over
    the whole history, so a shift just above k still adds up to h), else over the window."""
    spec = ctx.check.cusum
    assert spec is not None  # noqa: S101 - the caller checked
    prev = _carried(ctx)
    if prev is None or prev.cusum_hi is None or prev.cusum_lo is None:
        window = xs[-(TREND_RUNS + 1) :]
        return trend.cusum(window, mean=b.centre, sd=b.sd, k=spec.k)[-1], len(window)
    z = (float(ctx.value) - b.centre) / b.sd
    point = trend.CusumPoint(
        s_hi=max(0.0, prev.cusum_hi + z - spec.k), s_lo=max(0.0, prev.cusum_lo - z - spec.k)
    )
    return point, prev.n_runs + 1


def _trend_findings(ctx: _Context) -> tuple[list[Finding], TrendState | None]:
    check, b = ctx.check, ctx.baseline
    if b is None or b.sd <= 0.0 or isinstance(ctx.value, bool):
        return [], None
    out: list[Finding] = []
    xs = _sequence(ctx)
    ewma_value: float | None = None
    cusum_sums: tuple[float, float] | None = None
    n_runs = 0
    if check.westgard:
        z = [(x - b.centre) / b.sd for x in xs[-(WESTGARD_RUNS + 1) :]]
        fired = westgard.violations(z, check.westgard)
        if fired:
            # 1-2s alone is the warning rule: it calls for a look, not for rejecting the run.
            only_warning = fired == [westgard.WARNING_RULE]
            out.append(
                _trend(
                    ctx,
                    Severity.NOTICE if only_warning else check.westgard_severity,
                    messages.westgard_message(ctx.file_name, ctx.path, ctx.value, fired, z[-1], b),
                    f"Westgard {', '.join(fired)}",
                    fired[0],
                )
            )
    if check.ewma is not None:
        spec = check.ewma
        p, n_runs = _ewma_now(ctx, b, xs)
        ewma_value = p.ewma
        if p.is_out:
            bound = p.upper if p.ewma > p.upper else p.lower
            out.append(
                _trend(
                    ctx,
                    check.westgard_severity,
                    messages.ewma_message(ctx.file_name, ctx.path, p.ewma, bound, spec.lam),
                    f"EWMA outside [{p.lower:.4g}, {p.upper:.4g}] (λ {spec.lam:g}, L {spec.L:g})",
                    "ewma",
                )
            )
    if check.cusum is not None:
        c, n_runs = _cusum_now(ctx, b, xs)
        cusum_sums = (c.s_hi, c.s_lo)
        s = max(c.s_hi, c.s_lo)
        if s > check.cusum.h:
            out.append(
                _trend(
                    ctx,
                    check.westgard_severity,
                    messages.cusum_message(
                        ctx.file_name, ctx.path, s, check.cusum.h, upward=c.s_hi >= c.s_lo
                    ),
                    f"CUSUM above h {check.cusum.h:g} (k {check.cusum.k:g})",
                    "cusum",
                )
            )
    if ewma_value is None and cusum_sums is None:
        return out, None
    state = TrendState(
        check=check.name,
        path=ctx.path,
        spec=trend_spec(check),
        n_runs=n_runs,
        ewma=ewma_value,
        cusum_hi=cusum_sums[0] if cusum_sums else None,
        cusum_lo=cusum_sums[1] if cusum_sums else None,
    )
    return out, state


def _forecast_finding(ctx: _Context) -> Finding | None:
    spec = ctx.check.forecast
    if spec is None or isinstance(ctx.value, bool):
        return None
    upper, lower = critical_bounds(ctx.check.critical)
    if upper is None and lower is None:
        return None
    points = _last([p for p in ctx.recent if _is_number(p.value)], spec.runs - 1)
    times_h = [_hours(p.acquired_at, ctx.acquired_at) for p in points] + [0.0]
    values = [*_numbers(points), float(ctx.value)]
    fc = trend.forecast(times_h, values, upper=upper, lower=lower)
    if fc is None or fc.hours > spec.warn_within_h:
        return None
    return Finding(
        check=ctx.check.name,
        severity=spec.severity,
        metric=ctx.path,
        subject=ctx.path,
        message=messages.forecast_message(ctx.file_name, ctx.path, fc),
        value=ctx.value,
        limit=f"critical {'above' if fc.limit == upper else 'below'} {fc.limit:g}",
        rule="forecast",
        baseline=None,
        forecast_h=round(fc.hours, 2),
    )


def judge(
    metrics: RunMetrics,
    *,
    file_name: str,
    acquired_at: datetime,
    checks: Sequence[Check],
    history: History | None,
) -> Judgement:
    """Evaluate every applicable check on one run.

    Args:
        metrics: the run's metrics; checks read ``metrics.flat()``.
        file_name: the run's file name, matched against ``applies_to`` and shown in messages.
        acquired_at: the run's acquisition time; history is read strictly before it.
        checks: the config's checks, in config order (findings follow that order).
        history: earlier runs, or None (config-only judging: fixed baselines only, no trends,
            and ``for_runs`` > 1 never fires).

    Returns:
        The run status (the highest finding severity, ``ok`` without findings), the findings, and
        the (check, metric path) pairs evaluated: those that apply to the file and have a value.
    """
    flat = _judgeable(metrics)
    findings: list[Finding] = []
    evaluated: set[tuple[str, str]] = set()
    states: list[TrendState] = []
    for check, path, value in _evaluated(flat, file_name, checks):
        evaluated.add((check.name, path))
        found, state = _judge_path(check, path, value, file_name, acquired_at, history)
        findings.extend(found)
        if state is not None:
            states.append(state)
    status = Status.OK
    for f in findings:
        candidate = Status(f.severity.value)
        if STATUS_RANK[candidate] > STATUS_RANK[status]:
            status = candidate
    return Judgement(
        status=status,
        findings=tuple(findings),
        evaluated=frozenset(evaluated),
        trend_states=tuple(states),
    )


def _judgeable(metrics: RunMetrics) -> dict[str, float | bool | None]:
    flat = metrics.flat()
    if not metrics.signal.ms1_count:
        # No MS1 spectra (MGF, an MS2-only export): calibrants and expected ions were never
        # searched, so their values are missing, not "lost" or "not found" (README: null + note).
        # Expected transitions of a targeted run were searched in its chromatograms (found is
        # True or False): they, and the aggregates over them, are judged.
        searched = {ion.name for ion in metrics.expected_ions if ion.found is not None}
        flat = {
            k: v
            for k, v in flat.items()
            if not k.startswith(MS1_ONLY_PREFIXES) or _searched_ion_path(k, searched)
        }
    return flat


def _searched_ion_path(path: str, searched: set[str]) -> bool:
    """An ``expected_ion.<name>.<value>`` of a searched ion, or an aggregate over them."""
    if path.startswith("expected_ions."):
        return bool(searched)
    if not path.startswith("expected_ion."):
        return False
    return path[len("expected_ion.") :].rpartition(".")[0] in searched


def _evaluated(
    flat: dict[str, float | bool | None], file_name: str, checks: Sequence[Check]
) -> list[tuple[Check, str, float | bool]]:
    """The (check, metric path, value) triples with a value to judge, in config order.

    A finding's subject is its metric path, so the (check, path) pairs are the alert keys this
    run judged."""
    out: list[tuple[Check, str, float | bool]] = []
    for check in checks:
        if not check.applies_to_file(file_name):
            continue
        for path in expand(check.metric, flat):
            value = flat[path]
            if value is None or is_missing(value):
                continue
            out.append((check, path, value))
    return out


def _judge_path(
    check: Check,
    path: str,
    value: float | bool,
    file_name: str,
    acquired_at: datetime,
    history: History | None,
) -> tuple[list[Finding], TrendState | None]:
    accepted: list[float] = []
    recent: list[HistoryPoint] = []
    previous: TrendState | None = None
    fixed = check.baseline.mean is not None and check.baseline.sd is not None
    if history is not None:
        if _needs_baseline(check) and not fixed:
            accepted = [
                float(p.value)
                for p in _points(
                    history,
                    path,
                    before=acquired_at,
                    applies_to=check.applies_to,
                    limit=check.baseline.runs,
                    accepted_only=True,
                )
                if not isinstance(p.value, bool) and p.value is not None
            ]
        recent = _points(
            history,
            path,
            before=acquired_at,
            applies_to=check.applies_to,
            limit=_recent_limit(check),
            accepted_only=False,
        )
        if check.ewma is not None or check.cusum is not None:
            previous = history.trend_state(check.name, path, before=acquired_at)
    baseline = from_spec(check.baseline, accepted) if _needs_baseline(check) else None
    ctx = _Context(
        check=check,
        path=path,
        value=value,
        file_name=file_name,
        acquired_at=acquired_at,
        baseline=baseline,
        recent=recent,
        previous=previous,
    )
    out: list[Finding] = []
    limit = _limit_finding(ctx)
    if limit is not None:
        out.append(limit)
    trend_found, state = _trend_findings(ctx)
    out.extend(trend_found)
    if limit is None or limit.severity is not Severity.CRITICAL:
        fc = _forecast_finding(ctx)
        if fc is not None:
            out.append(fc)
    return out, state
