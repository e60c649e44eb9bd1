"""Finding text for a person on a phone: what, how far off, which run, what it means.

Numbers are rounded to what a reader can act on: mass errors to 0.1 ppm with a sign,
intensities to three significant digits with k/M/G, fractions as whole percent, hours to the
nearest hour (minutes below 2 h). Metric paths become words (``calibrant.siloxane-445.median_ppm``
reads "calibrant siloxane-445 median error").
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from watcher.rules.westgard import RULE_MEANING

if TYPE_CHECKING:
    from watcher.records import Severity
    from watcher.rules.baseline import Baseline
    from watcher.rules.checks import Hit
    from watcher.rules.trend import Forecast

_CALIBRANT_KEYS = {
    "median_ppm": "median error",
    "mad_ppm": "error spread (MAD)",
    "p05_ppm": "5th-percentile error",
    "p95_ppm": "95th-percentile error",
    "found_fraction": "found in MS1 scans",
    "median_intensity": "median intensity",
    "slope_ppm_per_h": "drift within the run",
    "scans_found": "scans found",
    "mz": "m/z",
}
_SIGNAL_KEYS = {
    "tic_median": "median TIC",
    "bpi_median": "median base peak intensity",
    "dropouts": "signal dropouts",
    "longest_dropout_s": "longest signal dropout",
    "ms1_count": "MS1 scan count",
    "ms2_count": "MS2 scan count",
    "cycle_time_s_median": "median cycle time",
    "ms1_injection_time_ms_median": "median MS1 injection time",
    "ms2_injection_time_ms_median": "median MS2 injection time",
}
_ION_KEYS = {
    "found": "",
    "apex_intensity": "apex intensity",
    "apex_rt_s": "apex RT",
    "ppm": "mass error",
    "fwhm_s": "peak width (FWHM)",
    "m1_ratio": "M+1/M ratio",
}
_ADVICE_RECALIBRATE = "recalibrate before the next sample"
_ADVICE_SIGNAL = "check the spray, the source and the LC flow"
_ADVICE_QC_IONS = "check the QC standard, the column and the LC"


def _split(path: str) -> tuple[str, str, str]:
    """(family, name, key): ``calibrant.x.median_ppm`` -> (calibrant, x, median_ppm)."""
    family, _, rest = path.partition(".")
    if family in ("calibrant", "expected_ion"):
        name, _, key = rest.rpartition(".")
        return family, name, key
    return family, "", rest


def subject_of(metric: str) -> str:
    """What a metric path is about: the calibrant or ion name, else the metric group."""
    parts = metric.split(".")
    if len(parts) >= 3 and parts[0] in ("calibrant", "expected_ion"):
        return parts[1]
    return parts[0]


def metric_label(path: str) -> str:
    """Words for a metric path."""
    family, name, key = _split(path)
    if family == "calibrant":
        return f"calibrant {name} {_CALIBRANT_KEYS.get(key, key.replace('_', ' '))}"
    if family == "expected_ion":
        words = _ION_KEYS.get(key, key.replace("_", " "))
        return f"expected ion {name} {words}".rstrip()
    if family == "signal":
        return _SIGNAL_KEYS.get(key, key.replace("_", " "))
    if path == "expected_ions.found_fraction":
        return "expected ions found"
    if path == "expected_ions.missing_count":
        return "expected ions missing"
    if path == "file.checksum_ok":
        return "file checksum matches"
    return path.replace(".", " ").replace("_", " ")


def metric_unit(path: str) -> str:
    """The unit of a metric path, from its name: ppm, s, ms, %, ppm/h or '' (counts/intensity)."""
    key = path.rpartition(".")[2]
    if key.endswith("_per_h"):
        return "ppm/h"
    if key.endswith("ppm"):
        return "ppm"
    if key.endswith("fraction"):
        return "%"
    if key.endswith(("_ms", "_ms_median")):
        return "ms"
    if key.endswith(("_s", "_s_median")):
        return "s"
    return ""


def advice(path: str) -> str:
    """What the finding means for the lab, by metric family."""
    family, _, key = _split(path)
    if family == "mass_correction" or (family == "calibrant" and "ppm" in key):
        return _ADVICE_RECALIBRATE
    if family == "calibrant":
        return "check the calibrant (lock mass) supply"
    if family == "signal":
        return _ADVICE_SIGNAL
    if family in ("expected_ion", "expected_ions"):
        return _ADVICE_QC_IONS
    if family == "file":
        return "the file changed after it was written: check how it was copied or edited"
    return "review this run"


def fmt_number(x: float) -> str:
    """Three significant digits (k/M/G from 10 000 on), no trailing zeros: 1.23 M, 14.8 k, 0.31."""
    a = abs(x)
    for scale, suffix in ((1e9, " G"), (1e6, " M"), (1e3, " k"), (1.0, "")):
        if a >= scale and (scale != 1e3 or a >= 1e4):
            return _sig3(x / scale) + suffix
    return "0" if a == 0 else f"{x:.2g}"


def _sig3(v: float) -> str:
    # Fixed-point with 3 significant digits; "%g" would switch to exponent notation at 1000.
    digits = len(str(int(abs(v)))) if abs(v) >= 1 else 1
    text = f"{v:.{max(0, 3 - digits)}f}"
    return text.rstrip("0").rstrip(".") if "." in text else text


def fmt_value(path: str, value: float | bool) -> str:
    """A value with its unit: ``+5.8 ppm``, ``12 s``, ``67 %``, ``1.2 M``, ``true``."""
    if isinstance(value, bool):
        return str(value).lower()
    unit = metric_unit(path)
    if unit in ("ppm", "ppm/h"):
        return f"{value:+.1f} {unit}" if unit == "ppm" else f"{value:+.2g} ppm/h"
    if unit == "%":
        return f"{value * 100:.0f} %"
    text = fmt_number(value)
    return f"{text} {unit}" if unit else text


def fmt_limit(path: str, x: float) -> str:
    """A configured limit with its unit, as typed by the lab: ``+5 ppm``, ``30 %``, ``1 M``."""
    unit = metric_unit(path)
    if unit == "ppm":
        return f"{x:+g} ppm"
    if unit == "%":
        return f"{x * 100:g} %"
    text = fmt_number(x)
    return f"{text} {unit}" if unit else text


def _range(path: str, lo: float, hi: float) -> str:
    unit = metric_unit(path)
    if lo == -hi and unit == "ppm":
        return f"±{hi:g} ppm"
    return f"{fmt_limit(path, lo)} to {fmt_limit(path, hi)}"


def baseline_text(path: str, baseline: Baseline) -> str:
    """``median 1.2 M, SD 50 k over 20 accepted runs`` or ``lab mean +0 ppm, SD 1``."""
    unit = metric_unit(path)
    sd = f"{baseline.sd * 100:.2g} %" if unit == "%" else fmt_number(baseline.sd)
    sd = f"{sd} {unit}" if unit and unit != "%" else sd
    if baseline.is_fixed:
        return f"lab mean {fmt_value(path, baseline.centre)}, SD {sd}"
    return (
        f"median {fmt_value(path, baseline.centre)}, robust SD {sd} "
        f"over {baseline.n_runs} accepted runs"
    )


def _hit_phrase(path: str, hit: Hit, baseline: Baseline | None) -> str:
    field, th, compared = hit.field, hit.threshold, hit.compared
    if isinstance(th, bool) or isinstance(compared, bool):
        return hit.limit
    base = f"the baseline {fmt_value(path, baseline.centre)}" if baseline else "the baseline"
    if field in ("above", "below") and isinstance(th, float):
        return f"{field} {fmt_limit(path, th)}"
    if field in ("outside", "inside") and isinstance(th, tuple):
        return f"{field} {_range(path, th[0], th[1])}"
    if field.endswith("_ratio") and isinstance(th, float):
        side = "below" if field.startswith("below") else "above"
        return f"{compared * 100:.0f} % of {base}, {side} the {th * 100:g} % limit"
    if field.startswith("diff_"):
        diff = fmt_value(path, compared) if metric_unit(path) == "ppm" else fmt_number(compared)
        return f"{diff} from {base}, {hit.limit.replace('baseline difference ', '')}"
    if isinstance(th, tuple):
        lo, hi = th
        beyond = f"beyond ±{hi:g} SD" if lo == -hi else f"outside {lo:g} to {hi:g} SD"
    else:
        beyond = f"{'above' if field == 'z_above' else 'below'} {th:g} SD"
    return f"z = {compared:+.1f} against {base}, {beyond}"


def limit_message(
    file_name: str,
    path: str,
    value: float | bool,
    hit: Hit,
    severity: Severity,
    *,
    baseline: Baseline | None,
    for_runs: int = 1,
) -> str:
    """``QC_0412.mzML: calibrant siloxane-445 median error +5.8 ppm, outside ±5 ppm (critical)
    — recalibrate before the next sample``."""
    persist = f" for {for_runs} runs in a row" if for_runs > 1 else ""
    tail = f"({severity}){persist} — {advice(path)}"
    if isinstance(value, bool):
        if path.endswith(".found"):
            return f"{file_name}: {metric_label(path)} {'found' if value else 'not found'} {tail}"
        return f"{file_name}: {metric_label(path)} is {fmt_value(path, value)} {tail}"
    phrase = _hit_phrase(path, hit, baseline)
    return f"{file_name}: {metric_label(path)} {fmt_value(path, value)}, {phrase} {tail}"


def westgard_message(
    file_name: str, path: str, value: float, rules: list[str], z: float, baseline: Baseline
) -> str:
    """Names the rule that fired, what it means, and the other rules that fired with it."""
    first = rules[0]
    others = f"; also {', '.join(rules[1:])}" if len(rules) > 1 else ""
    return (
        f"{file_name}: {metric_label(path)} {fmt_value(path, value)} (z = {z:+.1f}) breaks "
        f"Westgard {first}: {RULE_MEANING[first]}{others} — {advice(path)}"
    )


def ewma_message(file_name: str, path: str, ewma: float, limit: float, lam: float) -> str:
    """The smoothed value has left its control limit: a small, steady shift."""
    side = "above" if ewma > limit else "below"
    return (
        f"{file_name}: {metric_label(path)} is drifting: its EWMA (λ {lam:g}) "
        f"{fmt_value(path, ewma)} is {side} the control limit {fmt_value(path, limit)} — "
        f"{advice(path)}"
    )


def cusum_message(file_name: str, path: str, s: float, h: float, *, upward: bool) -> str:
    """The cumulative sum crossed its decision interval: a sustained shift."""
    direction = "upward" if upward else "downward"
    return (
        f"{file_name}: {metric_label(path)} shows a sustained {direction} shift: CUSUM "
        f"{s:.1f} SD, over the decision interval {h:g} SD — {advice(path)}"
    )


def fmt_hours(hours: float) -> str:
    """``about 7 h``; below 2 h in minutes (``about 45 min``)."""
    if hours < 2.0:
        return f"about {max(1, round(hours * 60))} min"
    return f"about {round(hours)} h"


def forecast_message(file_name: str, path: str, fc: Forecast) -> str:
    """``QC_0412.mzML: calibrant siloxane-445 median error reaches +5 ppm in about 7 h at the
    current rate (+0.43 ppm/h) — recalibrate before the next sample``."""
    unit = metric_unit(path)
    if unit == "ppm":
        rate = f"{fc.slope_per_h:+.2g} ppm/h"
    elif unit == "%":
        rate = f"{fc.slope_per_h * 100:+.2g} %/h"
    else:
        rate = f"{fmt_number(fc.slope_per_h)}{' ' + unit if unit else ''}/h"
    return (
        f"{file_name}: {metric_label(path)} reaches {fmt_limit(path, fc.limit)} in "
        f"{fmt_hours(fc.hours)} at the current rate ({rate}) — {advice(path)}"
    )
